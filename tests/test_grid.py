"""Grid specification, tiling, executors, resumable runs (in-process and with a real kill -9)."""

from __future__ import annotations

import io
import os
import random
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import h5py
import numpy as np
import pytest

import ionbal
from ionbal import grid as G
from ionbal.grid import Axis, GridMismatchError, GridSpec, run_grid
from ionbal.io import is_grid_file, open_grid

T_AXIS = Axis.log("temperature", 3500.0, 9000.0, 9)
P_AXIS = Axis.log("gas_pressure", 1e1, 1e6, 8)
SPECIES = ("H-", "H I", "H II", "He I", "C I", "C II", "Fe I", "Fe II", "Fe III", "Ca II")


def small_spec(**kw) -> GridSpec:
    args = dict(temperature=T_AXIS, state=P_AXIS, species=SPECIES, tile_size=12)
    args.update(kw)
    return GridSpec(**args)


def datasets(path) -> dict:
    """Every dataset of a file as numpy (strings decoded)."""
    out = {}
    with h5py.File(path, "r") as f:
        for name, ds in f.items():
            v = ds[()]
            if ds.dtype.kind == "O":
                v = np.array([x.decode() if isinstance(x, bytes) else x for x in np.ravel(v)])
            out[name] = v
    return out


def assert_same_numbers(a, b) -> None:
    da, db = datasets(a), datasets(b)
    assert sorted(da) == sorted(db)
    for name in da:
        x, y = da[name], db[name]
        assert x.dtype == y.dtype, name
        assert x.shape == y.shape, name
        # bitwise: compare the raw bytes (NaN-safe)
        assert np.ascontiguousarray(x).tobytes() == np.ascontiguousarray(y).tobytes(), name


# --------------------------------------------------------------------------------------------------
# axes and specs
# --------------------------------------------------------------------------------------------------

def test_axis_forms():
    a = Axis.parse("temperature", "3000:9000:4:linear")
    assert a.values == (3000.0, 5000.0, 7000.0, 9000.0) and a.spacing == "linear"
    b = Axis.parse("gas_pressure", "1e2:1e6:5")
    assert b.spacing == "log"
    np.testing.assert_allclose(b.array, [1e2, 1e3, 1e4, 1e5, 1e6], rtol=1e-14)
    assert b.values[0] == 1e2 and b.values[-1] == 1e6  # exact ends
    c = Axis.parse("metallicity", "-2,-1,0")
    assert c.values == (-2.0, -1.0, 0.0) and c.spacing == "explicit"
    assert Axis.parse("metallicity", "-2:0:3").values == (-2.0, -1.0, 0.0)  # composition: linear by default
    assert Axis.parse("temperature", "5000").values == (5000.0,)
    assert Axis.from_dict(b.to_dict()) == b


@pytest.mark.parametrize("name, text, match", [
    ("temperature", "", "empty"),
    ("temperature", "3000:9000", "START:STOP:NUM"),
    ("temperature", "3000:9000:x", "not a whole number"),
    ("temperature", "3000:9000:0", "at least 1"),
    ("temperature", "9000:3000:5", "must increase"),
    ("temperature", "3000:9000:5:cubic", "spacing"),
    ("temperature", "3000,2000", "strictly increasing"),
    ("temperature", "3000,,4000", "empty value"),
    ("temperature", "3000,abc", "not a number"),
    ("gas_pressure", "-1,2", "must be positive"),
    ("gas_pressure", "0:10:3", "positive"),
    ("gas_pressure", "1e2,nan", "finite"),
    ("metallicity", "-20,0", "plausible"),
])
def test_axis_errors(name, text, match):
    with pytest.raises(ValueError, match=match):
        Axis.parse(name, text)


def test_axis_unknown_name():
    with pytest.raises(ValueError, match="unknown axis"):
        Axis.explicit("pressure", [1.0])


def test_spec_validation():
    with pytest.raises(ValueError, match="outside the partition-function tables"):
        GridSpec(Axis.log("temperature", 100.0, 5000.0, 3), P_AXIS)
    with pytest.raises(ValueError, match="not in the mixture"):
        small_spec(species=("Fe II",), mixture=ionbal.Mixture({"H": 12.0, "He": 10.9}))
    with pytest.raises(ValueError, match="more than once"):
        small_spec(species=("Fe II", "Fe+"))
    with pytest.raises(ValueError, match="cannot parse species"):
        small_spec(species=("Xq II",))
    with pytest.raises(ValueError, match="tile_size"):
        small_spec(tile_size=0)
    with pytest.raises(ValueError, match="overrides are only used"):
        small_spec(overrides={"He": 11.0})
    with pytest.raises(ValueError, match="GridSpec.state"):
        GridSpec(T_AXIS, Axis.explicit("metallicity", [0.0]))


def test_default_species():
    mix = ionbal.Mixture.solar("AGSS09")
    names = G.default_species(mix)
    assert names[:6] == ("H-", "H I", "H II", "He I", "He II", "He III")
    assert ("Fe I" in names) and ("Fe III" in names) and ("Fe IV" not in names)
    assert len(names) == 1 + 2 + 3 * (len(mix) - 1)
    every = G.all_species(mix)
    assert "Fe XXVII" in every and len(every) > len(names)
    assert G.resolve_species(mix, "Fe II, H-") == ("H-", "Fe II")  # ordered by (Z, charge)


@pytest.mark.parametrize("nt, ns, size", [(9, 8, 12), (301, 241, 4096), (1, 1, 1), (5, 300, 64),
                                          (700, 3, 5000), (130, 130, 100000)])
def test_tiles_cover_the_grid_once(nt, ns, size):
    spec = GridSpec(Axis.explicit("temperature", np.linspace(3000, 9000, nt)),
                    Axis.explicit("gas_pressure", np.geomspace(1, 1e6, ns)), species=("H I",), tile_size=size)
    hits = np.zeros((nt, ns), dtype=int)
    tt, ts = spec.tile_shape
    ct, cs = spec.chunk_shape
    for k, t in enumerate(spec.tiles()):
        assert t.index == k
        hits[t.t0:t.t1, t.s0:t.s1] += 1
        # tiles start on chunk boundaries, so chunks never straddle tiles
        assert t.t0 % ct == 0 and t.s0 % cs == 0
    assert (hits == 1).all()
    assert (tt % ct == 0 or tt == nt) and (ts % cs == 0 or ts == ns)


# --------------------------------------------------------------------------------------------------
# computing tiles
# --------------------------------------------------------------------------------------------------

def test_fast_fractions_equal_the_api():
    T = np.geomspace(3000, 30000, 13)[:, None]
    P = np.geomspace(1e-2, 1e7, 11)[None, :]
    r = ionbal.solve(T, gas_pressure=P, errors="mask")
    names = G.default_species(r.mixture)
    fast = G.species_fractions(r, names)
    for k in range(len(names)):
        assert fast[k].tobytes() == np.asarray(r.fraction(names[k])).ravel().tobytes()


def test_tile_matches_direct_solve():
    spec = small_spec(number_densities=True)
    tile = spec.tiles()[3]
    out = G.compute_tile(spec.task(tile))
    T = T_AXIS.array[tile.t0:tile.t1][:, None]
    P = P_AXIS.array[tile.s0:tile.s1][None, :]
    r = ionbal.solve(T, gas_pressure=P)
    assert out["electron_density"].tobytes() == np.ascontiguousarray(r.electron_density).tobytes()
    assert "gas_pressure" not in out  # the state axis itself is not repeated
    k = spec.species.index("Fe II")
    assert out["ion_fraction"][k].tobytes() == np.ascontiguousarray(r.fraction("Fe II")).tobytes()
    np.testing.assert_allclose(out["number_density"][k], r.number_density("Fe II"), rtol=1e-14)
    assert out["status"].dtype == np.int8 and (out["status"] == 0).all()


def test_tiling_does_not_change_numbers(tmp_path):
    a = run_grid(small_spec(tile_size=5), tmp_path / "a.h5", progress=False)
    b = run_grid(small_spec(tile_size=100000), tmp_path / "b.h5", progress=False)
    assert a.n_tiles > 4 and b.n_tiles == 1
    da, db = datasets(a.path), datasets(b.path)
    for name in ("electron_density", "ion_fraction", "iterations", "status", "mean_molecular_weight"):
        assert da[name].tobytes() == db[name].tobytes(), name


def test_threads_executor_identical(tmp_path):
    a = run_grid(small_spec(), tmp_path / "a.h5", progress=False)
    b = run_grid(small_spec(), tmp_path / "b.h5", progress=False, executor="threads", workers=2)
    assert_same_numbers(a.path, b.path)


def test_run_summary_and_counts(tmp_path):
    run = run_grid(small_spec(), tmp_path / "g.h5", progress=False, command="test")
    assert run.n_points == 72 and run.converged == 72 and run.points_computed == 72
    text = run.summary()
    assert "g.h5" in text and "72 of 72" in text and "points/s" in text
    assert not G.parts_dir_for(run.path).exists()


def test_other_state_variables(tmp_path):
    for name, axis in (("electron_pressure", Axis.log("electron_pressure", 1e-3, 1e0, 5)),
                       ("mass_density", Axis.log("mass_density", 1e-10, 1e-6, 4)),
                       ("hydrogen_density", Axis.log("hydrogen_density", 1e12, 1e17, 4))):
        spec = GridSpec(T_AXIS, axis, species=("H I", "Fe II"))
        run = run_grid(spec, tmp_path / f"{name}.h5", progress=False)
        d = datasets(run.path)
        assert name in d and d[name].shape == (len(axis),)
        r = ionbal.solve(T_AXIS.array[:, None], **{name: axis.array[None, :]})
        assert d["electron_density"].tobytes() == np.ascontiguousarray(r.electron_density).tobytes()
        assert "gas_pressure" in d and d["gas_pressure"].shape == (len(T_AXIS), len(axis))


def test_composition_axes(tmp_path):
    spec = small_spec(metallicity=(-2.0, -1.0, 0.0), alpha=(0.0, 0.4), overrides={"He": 11.0},
                      species=("Fe I", "Fe II", "Mg II"))
    run = run_grid(spec, tmp_path / "c.h5", progress=False)
    d = datasets(run.path)
    assert d["electron_density"].shape == (3, 2, 9, 8)
    assert d["ion_fraction"].shape == (3, 2, 3, 9, 8)
    mix = ionbal.Mixture.solar("AGSS09").scaled(metallicity=-1.0, alpha=0.4).with_abundances(He=11.0)
    r = ionbal.solve(T_AXIS.array[:, None], gas_pressure=P_AXIS.array[None, :], mixture=mix)
    assert d["electron_density"][1, 1].tobytes() == np.ascontiguousarray(r.electron_density).tobytes()
    i_fe = list(d["element"]).index("Fe")
    assert d["abundance"][1, 1, i_fe] == pytest.approx(mix["Fe"])
    assert d["abundance"][0, 0, list(d["element"]).index("He")] == 11.0


# --------------------------------------------------------------------------------------------------
# safety: overwrite, resume, mismatching parts, damaged parts, lock
# --------------------------------------------------------------------------------------------------

def test_refuses_to_overwrite(tmp_path):
    out = tmp_path / "g.h5"
    out.write_bytes(b"precious")
    with pytest.raises(FileExistsError, match="already exists"):
        run_grid(small_spec(), out, progress=False)
    assert out.read_bytes() == b"precious"
    assert not G.parts_dir_for(out).exists()
    run_grid(small_spec(), out, progress=False, overwrite=True)
    assert is_grid_file(out)


def test_output_errors(tmp_path):
    with pytest.raises(FileNotFoundError, match="does not exist"):
        run_grid(small_spec(), tmp_path / "missing" / "g.h5", progress=False)
    (tmp_path / "d.h5").mkdir()
    with pytest.raises(IsADirectoryError):
        run_grid(small_spec(), tmp_path / "d.h5", progress=False)


class _Boom(KeyboardInterrupt):
    pass


def _interrupt_after(monkeypatch, n):
    real = G.compute_tile
    calls = {"n": 0}

    def flaky(task):
        if calls["n"] >= n:
            raise _Boom()
        calls["n"] += 1
        return real(task)

    monkeypatch.setattr(G.compute, "compute_tile", flaky)
    return real


def test_failure_before_any_tile_leaves_no_work_directory(tmp_path, monkeypatch):
    _interrupt_after(monkeypatch, 0)
    with pytest.raises(KeyboardInterrupt):
        run_grid(small_spec(), tmp_path / "g.h5", progress=False)
    assert sorted(p.name for p in tmp_path.iterdir()) == []


def test_interrupt_and_resume_is_bitwise_identical(tmp_path, monkeypatch):
    ref = run_grid(small_spec(), tmp_path / "ref.h5", progress=False)
    out = tmp_path / "g.h5"
    real = _interrupt_after(monkeypatch, 3)
    with pytest.raises(KeyboardInterrupt):
        run_grid(small_spec(), out, progress=False)
    assert not out.exists()
    parts = G.parts_dir_for(out)
    assert len(list(parts.glob("tile-*.npz"))) == 3 and (parts / "spec.json").exists()
    monkeypatch.setattr(G.compute, "compute_tile", real)
    notes = []
    run = run_grid(small_spec(), out, progress=False, notify=notes.append)
    assert run.tiles_resumed == 3 and any("resuming" in n for n in notes)
    assert run.points_computed == run.n_points - sum(t.size for t in small_spec().tiles()[:3])
    assert not parts.exists()
    assert_same_numbers(ref.path, out)


def test_mismatching_parts_are_refused(tmp_path, monkeypatch):
    out = tmp_path / "g.h5"
    real = _interrupt_after(monkeypatch, 2)
    with pytest.raises(KeyboardInterrupt):
        run_grid(small_spec(), out, progress=False)
    monkeypatch.setattr(G.compute, "compute_tile", real)
    other = small_spec(temperature=Axis.log("temperature", 3500.0, 9000.0, 10))
    with pytest.raises(GridMismatchError, match="temperature"):
        run_grid(other, out, progress=False)
    assert len(list(G.parts_dir_for(out).glob("tile-*.npz"))) == 2  # untouched
    run = run_grid(other, out, progress=False, discard_parts=True)
    assert run.tiles_resumed == 0 and run.n_points == 80


def test_damaged_part_is_recomputed(tmp_path, monkeypatch, capsys):
    ref = run_grid(small_spec(), tmp_path / "ref.h5", progress=False)
    out = tmp_path / "g.h5"
    real = _interrupt_after(monkeypatch, 3)
    with pytest.raises(KeyboardInterrupt):
        run_grid(small_spec(), out, progress=False)
    monkeypatch.setattr(G.compute, "compute_tile", real)
    part = sorted(G.parts_dir_for(out).glob("tile-*.npz"))[1]
    part.write_bytes(part.read_bytes()[:100])  # a disk error after the fact
    run_grid(small_spec(), out, progress=False)
    assert "damaged" in capsys.readouterr().err
    assert_same_numbers(ref.path, out)


def test_foreign_directory_in_the_way_is_left_alone(tmp_path):
    out = tmp_path / "g.h5"
    parts = G.parts_dir_for(out)
    parts.mkdir()
    (parts / "notes.txt").write_text("mine")
    with pytest.raises(FileExistsError, match="not an ionbal work directory"):
        run_grid(small_spec(), out, progress=False)
    assert (parts / "notes.txt").read_text() == "mine" and not out.exists()


def test_lock_refuses_a_second_writer(tmp_path):
    spec = small_spec()
    w1 = G.WorkDir(G.parts_dir_for(tmp_path / "g.h5"), spec)
    w1.open()
    try:
        w2 = G.WorkDir(G.parts_dir_for(tmp_path / "g.h5"), spec)
        with pytest.raises(G.GridBusyError, match="another ionbal process"):
            w2.open()
    finally:
        w1.close()


def test_progress_bar_format():
    buf = io.StringIO()
    bar = G.Progress(1000, stream=buf, enabled=True, interval=0.0)
    bar.skip(200)
    bar.update(300)
    bar.close()
    text = buf.getvalue()
    assert "50.0%" in text and "500/1,000" in text and "pts/s" in text and "left" in text
    assert text.endswith("\n")
    quiet = io.StringIO()
    bar = G.Progress(10, stream=quiet, enabled=False)  # --quiet: silent
    bar.update(10)
    bar.close()
    assert quiet.getvalue() == ""


def test_progress_lines_when_not_a_terminal(monkeypatch):
    # a batch log (not a terminal) gets whole lines at a fixed period and one at the end
    import ionbal.grid.progress as P

    now = [0.0]
    monkeypatch.setattr(P.time, "monotonic", lambda: now[0])
    log = io.StringIO()
    bar = G.Progress(100, stream=log, line_interval=10.0)
    for _ in range(10):  # 10 updates, 4 s apart: a line at 12, 24 and 36 s, and the last one
        now[0] += 4.0
        bar.update(10)
    bar.close()
    lines = log.getvalue().splitlines()
    assert len(lines) == 4 and "\r" not in log.getvalue()
    assert lines[-1].startswith("ionbal grid: 100.0% 100/100 pts") and "pts/s" in lines[-1]


# --------------------------------------------------------------------------------------------------
# kill -9 of a real child process, then resume
# --------------------------------------------------------------------------------------------------

KILL_ARGS = ["-T", "3000:20000:40", "-P", "1e0:1e6:36", "--tile-size", "36", "--species", "H-,H I,Fe I,Fe II",
             "-q"]


def _kill_spec() -> GridSpec:
    return GridSpec(Axis.parse("temperature", "3000:20000:40"), Axis.parse("gas_pressure", "1e0:1e6:36"),
                    species="H-,H I,Fe I,Fe II", tile_size=36)


def _spawn(out: Path, extra=()):
    env = dict(os.environ)
    env["PYTHONPATH"] = str(Path(ionbal.__file__).resolve().parents[1]) + os.pathsep + env.get("PYTHONPATH", "")
    return subprocess.Popen([sys.executable, "-m", "ionbal.cli", "grid", *KILL_ARGS, "-o", str(out), *extra],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env, cwd=str(out.parent))


def _kill_when(proc, out: Path, n_tiles: int, rng: random.Random, during_assembly=False, timeout=120.0):
    """kill -9 once at least n_tiles parts exist (or the assembly started); returns True if killed."""
    parts = G.parts_dir_for(out)
    t0 = time.monotonic()
    while proc.poll() is None:
        if during_assembly:
            ready = (parts / "assembling.h5").exists()
        else:
            ready = parts.is_dir() and len(list(parts.glob("tile-*.npz"))) >= n_tiles
        if ready:
            time.sleep(rng.uniform(0.0, 0.02))
            proc.send_signal(signal.SIGKILL)
            proc.wait()
            return True
        if time.monotonic() - t0 > timeout:
            proc.kill()
            raise AssertionError("the child grid run did not progress")
        time.sleep(0.002)
    return False


def test_kill_9_then_resume_is_bitwise_identical(tmp_path):
    rng = random.Random(20240611)
    ref = run_grid(_kill_spec(), tmp_path / "ref.h5", progress=False)
    out = tmp_path / "killed.h5"
    n_tiles = len(_kill_spec().tiles())
    proc = _spawn(out)
    killed = _kill_when(proc, out, rng.randint(2, n_tiles // 2), rng)
    assert killed, "the child finished before it could be killed"
    assert not out.exists()  # nothing under the final name
    assert G.parts_dir_for(out).is_dir()
    from ionbal.cli import main

    assert main(["grid", *KILL_ARGS, "-o", str(out)]) == 0
    assert not G.parts_dir_for(out).exists()
    assert_same_numbers(ref.path, out)


@pytest.mark.slow
def test_kill_9_at_several_moments(tmp_path):
    """Several kills (tiles, assembly; with a previous complete file and --overwrite), then resume."""
    rng = random.Random(7)
    ref = run_grid(_kill_spec(), tmp_path / "ref.h5", progress=False)
    out = tmp_path / "g.h5"
    n_tiles = len(_kill_spec().tiles())
    # a previous complete file of another grid stands at the final path
    previous = run_grid(small_spec(), tmp_path / "previous.h5", progress=False).path
    shutil.copy(previous, out)
    old = out.read_bytes()
    kills = 0
    for attempt in range(6):
        proc = _spawn(out, ["--overwrite", "--discard-parts"])
        assembly = attempt in (2, 5)
        killed = _kill_when(proc, out, rng.randint(1, n_tiles - 1), rng, during_assembly=assembly)
        if not killed:
            assert proc.returncode == 0, proc.stderr.read().decode()
            break
        kills += 1
        print(f"kill {kills}: {'assembly' if assembly else 'tiles'}, "
              f"{len(list(G.parts_dir_for(out).glob('tile-*.npz')))} of {n_tiles} tiles stored")
        # after each kill: the previous complete file, or (after the rename) the new complete one
        assert out.exists()
        if out.read_bytes() != old:
            assert is_grid_file(out)
            with open_grid(out) as g:
                assert g.shape == (40, 36)
            break
    assert kills >= 1
    from ionbal.cli import main

    if G.parts_dir_for(out).exists() or out.read_bytes() == old:
        assert main(["grid", *KILL_ARGS, "-o", str(out), "--overwrite", "--discard-parts"]) == 0
    assert_same_numbers(ref.path, out)


# --------------------------------------------------------------------------------------------------
# Dask
# --------------------------------------------------------------------------------------------------

def test_dask_local_cluster_gives_identical_numbers(tmp_path):
    pytest.importorskip("dask.distributed")
    from dask.distributed import Client, LocalCluster

    spec = small_spec(tile_size=20)
    ref = run_grid(spec, tmp_path / "ref.h5", progress=False)
    with LocalCluster(n_workers=2, processes=True, threads_per_worker=1, host="127.0.0.1",
                      dashboard_address=None) as cluster:
        address = cluster.scheduler_address
        assert address.startswith("tcp://127.0.0.1")
        run = run_grid(spec, tmp_path / "dask.h5", progress=False, scheduler=address)
        with Client(address) as client:
            assert len(client.scheduler_info()["workers"]) == 2
    assert run.n_tiles > 2
    assert_same_numbers(ref.path, run.path)
