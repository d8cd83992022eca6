"""Fast fault injection (issue 15): disk full, permissions and bad paths, resuming with other options,
damaged grid files.  Each case ends in a one-line error naming the problem and loses no complete file."""

from __future__ import annotations

import errno
import os
import re
from pathlib import Path

import h5py
import numpy as np
import pytest

from ionbal import grid as G
from ionbal.cli import main
from ionbal.grid import runner as R
from ionbal.io import is_grid_file, open_grid

SMALL = ["-T", "4000:8000:5", "-P", "1e2:1e5:4", "--species", "H I,H II,Fe I,Fe II", "--tile-size", "6", "-q"]
MODEL = Path(__file__).resolve().parents[1] / "examples" / "vessa7-model.txt"


def _one_line_error(capsys, code, expected_code=2):
    err = capsys.readouterr().err
    assert code == expected_code, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("ionbal"), err
    assert "Traceback" not in err
    return lines[0]


@pytest.fixture
def previous(tmp_path, monkeypatch):
    """A complete grid r.h5 in the current directory, and its bytes."""
    monkeypatch.chdir(tmp_path)
    assert main(["grid", *SMALL, "-o", "r.h5"]) == 0
    return tmp_path / "r.h5", (tmp_path / "r.h5").read_bytes()


def _enospc(*args, **kw):
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


def test_disk_full_while_assembling_keeps_the_previous_file(previous, monkeypatch, capsys):
    out, before = previous
    real = R.write_grid_file

    def fills_the_disk(path, *args, **kw):
        path.write_bytes(b"\0" * 1000)  # part of a file, then the disk is full
        _enospc()

    monkeypatch.setattr(R, "write_grid_file", fills_the_disk)
    capsys.readouterr()
    line = _one_line_error(capsys, main(["grid", *SMALL, "-T", "4000:8000:6", "-o", "r.h5", "--overwrite"]))
    assert "No space left on device" in line
    assert out.read_bytes() == before  # the previous complete file is untouched
    parts = G.parts_dir_for(out)
    assert not (parts / "assembling.h5").exists()  # no half file anywhere
    monkeypatch.setattr(R, "write_grid_file", real)
    assert main(["grid", *SMALL, "-T", "4000:8000:6", "-o", "r.h5", "--overwrite"]) == 0  # resumes
    assert not parts.exists() and is_grid_file(out)
    with open_grid(out) as g:
        assert g.shape[0] == 6


def test_disk_full_while_saving_a_tile(previous, monkeypatch, capsys):
    out, before = previous
    monkeypatch.setattr(G.workdir.np, "savez", _enospc)
    capsys.readouterr()
    line = _one_line_error(capsys, main(["grid", *SMALL, "-T", "4000:8000:6", "-o", "r.h5", "--overwrite"]))
    assert "No space left on device" in line
    assert out.read_bytes() == before
    assert not G.parts_dir_for(out).exists()  # nothing was finished: no trace of the run
    assert sorted(p.name for p in out.parent.iterdir()) == ["r.h5"]


def test_disk_full_writing_a_column(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert main(["column", str(MODEL), "-o", "c.ecsv", "-q"]) == 0
    before = (tmp_path / "c.ecsv").read_bytes()
    import ionbal.io.atomic as A

    monkeypatch.setattr(A.os, "fsync", _enospc)  # the data do not reach the disk
    capsys.readouterr()
    line = _one_line_error(capsys, main(["column", str(MODEL), "-o", "c.ecsv", "-q", "--overwrite"]))
    assert "No space left on device" in line
    assert (tmp_path / "c.ecsv").read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["c.ecsv"]


@pytest.mark.parametrize("case", ["read-only directory", "output is a directory", "missing directory"])
@pytest.mark.parametrize("command", ["grid", "column"])
def test_bad_output_paths_fail_before_computing(tmp_path, monkeypatch, capsys, case, command):
    target = {"read-only directory": tmp_path / "ro" / "x.h5", "output is a directory": tmp_path / "d.h5",
              "missing directory": tmp_path / "nope" / "x.h5"}[case]
    if case == "read-only directory":
        target.parent.mkdir()
        target.parent.chmod(0o500)
        if os.geteuid() == 0:  # root may write anyway: ask the access check what a user would get
            real_access = os.access
            monkeypatch.setattr("ionbal.validate.os.access",
                                lambda p, mode: False if Path(p) == target.parent else real_access(p, mode))
    if case == "output is a directory":
        target.mkdir()

    def no_computing(*a, **k):
        raise AssertionError("computed before checking the output path")

    monkeypatch.setattr(G.compute, "compute_tile", no_computing)
    monkeypatch.setattr("ionbal.column.solve_column", no_computing, raising=False)
    args = ["grid", *SMALL] if command == "grid" else ["column", str(MODEL), "-q"]
    line = _one_line_error(capsys, main([*args, "-o", str(target)]))
    assert {"read-only directory": "not writable", "output is a directory": "is a directory",
            "missing directory": "does not exist"}[case] in line
    assert not G.parts_dir_for(target).exists()


@pytest.mark.parametrize("change", [["-T", "4000:8000:6"], ["--species", "H I,H II"], ["--float32"],
                                    ["--metallicity", "-1"], ["--tile-size", "4"]])
def test_resuming_with_other_options_never_mixes_parts(tmp_path, monkeypatch, capsys, change):
    monkeypatch.chdir(tmp_path)
    real = G.compute.compute_tile
    calls = []

    def dies_after_two(task):
        if len(calls) == 2:
            raise KeyboardInterrupt
        calls.append(1)
        return real(task)

    monkeypatch.setattr(G.compute, "compute_tile", dies_after_two)
    assert main(["grid", *SMALL, "-o", "r.h5"]) == 130
    parts = G.parts_dir_for(tmp_path / "r.h5")
    assert len(list(parts.glob("tile-*.npz"))) == 2
    monkeypatch.setattr(G.compute, "compute_tile", real)
    capsys.readouterr()
    args = [*SMALL, *change]
    line = _one_line_error(capsys, main(["grid", *args, "-o", "r.h5"]))
    assert "holds the parts of a different grid" in line and "--discard-parts" in line
    assert not (tmp_path / "r.h5").exists()
    assert main(["grid", *args, "-o", "r.h5", "--discard-parts"]) == 0
    assert is_grid_file(tmp_path / "r.h5")
    # equal to a run from scratch: no part of the first specification survived
    assert main(["grid", *args, "-o", "fresh.h5"]) == 0
    with h5py.File(tmp_path / "r.h5") as a, h5py.File(tmp_path / "fresh.h5") as b:
        for name in ("electron_density", "temperature"):
            assert np.array_equal(a[name][()], b[name][()], equal_nan=True)


def _damage(path: Path, how: str) -> None:
    if how == "truncated":
        data = path.read_bytes()
        path.write_bytes(data[: len(data) // 2])
    elif how == "another program's HDF5":
        path.unlink()
        with h5py.File(path, "w") as f:
            f["x"] = np.arange(3.0)
    elif how == "not HDF5":
        path.write_text("temperature,pressure\n1,2\n")
    elif how == "dataset removed":
        with h5py.File(path, "r+") as f:
            del f["electron_density"]
    elif how == "wrong shape":
        with h5py.File(path, "r+") as f:
            attrs = dict(f["electron_density"].attrs)
            del f["electron_density"]
            f["electron_density"] = np.zeros((2, 2))
            f["electron_density"].attrs.update({k: v for k, v in attrs.items() if k != "DIMENSION_LIST"})
    elif how == "empty":
        path.write_bytes(b"")


@pytest.mark.parametrize("how", ["truncated", "another program's HDF5", "not HDF5", "dataset removed",
                                 "wrong shape", "empty"])
def test_damaged_grid_files_give_one_line(previous, capsys, how):
    out, _ = previous
    _damage(out, how)
    capsys.readouterr()
    line = _one_line_error(capsys, main(["info", str(out)]))
    assert str(out.name) in line
    with pytest.raises(ValueError):
        with open_grid(out) as g:
            g.interpolate("electron_density", temperature=5000.0, gas_pressure=1e3)


# -- corrupt model files: read correctly or one line naming the problem -------------------------------------
def _model_variants() -> dict[str, tuple[str, str | None]]:
    """name -> (text, expected words of the error or None when the file must read like the original)."""
    base = MODEL.read_text()
    rows = [ln for ln in base.splitlines() if ln.strip() and not ln.startswith("#")]
    hdr, data = rows[0], rows[1:]
    t_value = data[0].split()[2]
    return {
        "byte-order mark": ("\ufeff" + base, None),
        "CRLF line ends": (base.replace("\n", "\r\n"), None),
        "tabs": ("\n".join("\t".join(ln.split()) for ln in rows) + "\n", None),
        "duplicate column": ("\n".join(ln + " " + ln.split()[2] for ln in rows) + "\n", "appears twice"),
        "NaN temperature": ("\n".join([hdr, data[0].replace(t_value, "nan", 1), *data[1:]]) + "\n", "nan"),
        "empty": ("", "empty"),
        "header only": (hdr + "\n", "no data rows"),
        "NUL bytes": ("\x00\x01garbage", "not a text file"),
        "ECSV with a wrong unit": ("# %ECSV 1.0\n# ---\n# datatype:\n"
                                   "# - {name: temperature, unit: m, datatype: float64}\n"
                                   "# - {name: gas_pressure, unit: dyn / cm2, datatype: float64}\n"
                                   "temperature gas_pressure\n5000 1e4\n6000 1e5\n", "does not convert to K"),
    }


@pytest.mark.parametrize("case", list(_model_variants()))
def test_damaged_model_files(tmp_path, monkeypatch, capsys, case):
    monkeypatch.chdir(tmp_path)
    text, expected = _model_variants()[case]
    p = tmp_path / ("m.ecsv" if "ECSV" in case else "m.txt")
    p.write_bytes(text.encode("utf-8"))
    code = main(["column", str(p), "-o", "c.ecsv", "-q"])
    if expected is None:
        assert code == 0, capsys.readouterr().err
        assert main(["column", str(MODEL), "-o", "ref.ecsv", "-q"]) == 0
        body = [[ln for ln in f.read_text().splitlines() if not ln.startswith("#")]
                for f in (tmp_path / "c.ecsv", tmp_path / "ref.ecsv")]
        assert body[0] == body[1]  # the same numbers as the clean file
    else:
        assert expected in _one_line_error(capsys, code)
        assert not (tmp_path / "c.ecsv").exists()


# -- property-based fuzzing of the model reader and of the axis syntax ----------------------------------------
from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as hs  # noqa: E402

_FUZZ = settings(deadline=None, max_examples=150, suppress_health_check=[HealthCheck.function_scoped_fixture])
#: what the fuzzers tried: cases, clean one-line errors, files read (printed at the end of the module)
FUZZ_TALLY: dict[str, dict[str, int]] = {}


def _tally(test: str, outcome: str) -> None:
    t = FUZZ_TALLY.setdefault(test, {"cases": 0, "read": 0, "clean one-line errors": 0})
    t["cases"] += 1
    t[outcome] += 1


@pytest.fixture(scope="module", autouse=True)
def _print_fuzz_figures():
    yield
    for test, t in FUZZ_TALLY.items():
        print(f"\n{test}: {t['cases']} cases, {t['read']} read, {t['clean one-line errors']} clean one-line errors, "
              "0 tracebacks, 0 silent NaN")
_TOKENS = hs.sampled_from(["temperature", "gas_pressure", "T", "Pgas", "depth", "log_tau", "5000", "1e4", "-1",
                           "nan", "inf", "0", "#", ",", "\t", " ", "\r\n", "\n", "\ufeff", "x", "1e400", "é"])


@_FUZZ
@given(text=hs.one_of(hs.text(max_size=300), hs.lists(_TOKENS, max_size=60).map("".join)))
def test_fuzz_model_reader(tmp_path, text):
    from ionbal.io import read_model

    p = tmp_path / "fuzz.txt"
    p.write_bytes(text.encode("utf-8", "surrogatepass"))
    _check_model_read(p, "model reader (text)")


def _check_model_read(p: Path, test: str) -> None:
    from ionbal.io import read_model

    try:
        t = read_model(p)
    except ValueError as exc:  # the one allowed failure: a message naming the problem
        assert str(exc) and "\n" not in str(exc).strip()
        _tally(test, "clean one-line errors")
        return
    assert len(t)
    text = p.read_bytes().decode("utf-8", "replace")
    for name in t.meta["ionbal_columns"]:  # every column read as a known quantity: numbers, never a silent NaN
        v = np.asarray(t[name], dtype=float)
        # a NaN or infinity only where the file spells one (nan, inf, or a number beyond double range
        # such as 1e400): read as written, then refused by solve_column for the state columns and
        # skipped, with a count, by the comparisons (tests/test_column.py)
        assert np.all(np.isfinite(v)) or re.search(r"nan|inf|e\+?\d{3}", text, re.I), name
    _tally(test, "read")


_UNITS = hs.sampled_from(["K", "dyn / cm2", "Pa", "g / cm3", "kg / m3", "cm-3", "m", "km", "", "deg_C", "bar",
                          "erg", "nonsense", "K2", "1 / cm3", "dex", "s"])
_NAMES = hs.sampled_from(["temperature", "gas_pressure", "T", "Pgas", "rho", "mass_density", "ne",
                          "electron_pressure", "depth", "log_tau", "x"])
_DTYPES = hs.sampled_from(["float64", "float32", "int64", "string", "bool", "complex128", "nonsense"])
_VALUES = hs.sampled_from(["5000", "1e4", "-1", "nan", "0", "x", "1e400", "3.5e-3", '""', "True", "6000"])


@_FUZZ
@given(cols=hs.lists(hs.tuples(_NAMES, _UNITS, _DTYPES), min_size=0, max_size=4),
       rows=hs.lists(hs.lists(_VALUES, min_size=0, max_size=5), max_size=5), version=hs.sampled_from(["1.0", "0.9", "x"]))
def test_fuzz_ecsv_model_reader(tmp_path, cols, rows, version):
    """ECSV headers with random names, units and data types, and random values below them."""
    head = [f"# %ECSV {version}", "# ---", "# datatype:"]
    head += [f"# - {{name: {n}, unit: {u!r}, datatype: {d}}}" if u else f"# - {{name: {n}, datatype: {d}}}"
             for n, u, d in cols]
    body = [" ".join(n for n, _, _ in cols)] + [" ".join(r) for r in rows]
    p = tmp_path / "fuzz.ecsv"
    p.write_text("\n".join(head + body) + "\n")
    _check_model_read(p, "model reader (ECSV)")


@_FUZZ
@given(text=hs.one_of(hs.text(max_size=40), hs.lists(hs.sampled_from(["1e3", "5000", "-2", ":", ",", "log",
                                                                      "linear", "0", "nan", "3", "inf", " ",
                                                                      "1e999", "2.5"]),
                                                     max_size=9).map("".join)),
       name=hs.sampled_from(["temperature", "gas_pressure", "metallicity"]))
def test_fuzz_axis_syntax(text, name):
    from ionbal.grid import Axis

    try:
        ax = Axis.parse(name, text)
    except ValueError as exc:
        assert name in str(exc) or "axis" in str(exc)
        _tally("axis syntax", "clean one-line errors")
        return
    _tally("axis syntax", "read")
    v = np.asarray(ax.array() if callable(getattr(ax, "array", None)) else ax.values, dtype=float)
    assert len(v) >= 1 and np.all(np.isfinite(v)) and np.all(np.diff(v) > 0)


def test_a_reader_holding_the_file_open_during_overwrite(previous, capsys):
    """The reader keeps reading the complete old file; the path gets the complete new one (POSIX rename)."""
    out, before = previous
    with open_grid(out) as g:
        old_ne = g["electron_density"].copy()
        assert main(["grid", *SMALL, "-T", "4000:8000:6", "-o", "r.h5", "--overwrite"]) == 0
        assert g.shape[0] == 5  # still the old, complete file
        g._cache.clear()  # read from the file again, not from memory
        g.verify()  # every chunk of the old file still reads and checks
        assert np.array_equal(g["electron_density"], old_ne, equal_nan=True)
    with open_grid(out) as g:
        assert g.shape[0] == 6


def test_non_monotonic_depth_is_solved_with_a_warning_naming_the_rows(tmp_path, monkeypatch, capsys):
    """Decision (issue 15): a depth column out of order is not an error (each depth point is solved on
    its own) but never silent: a WARNING names the first rows that break the order."""
    monkeypatch.chdir(tmp_path)
    lines = MODEL.read_text().splitlines()
    data = [k for k, ln in enumerate(lines) if ln.strip() and not ln.startswith("#")][1:]
    lines[data[4]], lines[data[5]] = lines[data[5]], lines[data[4]]  # two depth points swapped
    (tmp_path / "m.txt").write_text("\n".join(lines) + "\n")
    capsys.readouterr()
    assert main(["column", "m.txt", "-o", "c.ecsv", "-q"]) == 0
    out = capsys.readouterr().out
    warned = [ln for ln in out.splitlines() if "WARNING" in ln]
    assert len(warned) == 2, out  # log_tau and depth, one line each
    assert all("not monotonic" in ln and f"data row 6 (line {data[5] + 1})" in ln for ln in warned), warned
    assert main(["column", str(MODEL), "-o", "clean.ecsv", "-q"]) == 0
    assert "WARNING" not in capsys.readouterr().out  # a clean file: no warning
    from ionbal.io import read_model

    assert read_model(MODEL).meta["ionbal_warnings"] == []
    lines[data[4]], lines[data[5]] = lines[data[5]], lines[data[4]]  # back in order, then reversed
    decreasing = "\n".join([lines[k] for k in range(data[0])] + [lines[k] for k in reversed(data)]) + "\n"
    (tmp_path / "down.txt").write_text(decreasing)  # running the other way is an order too
    assert read_model(tmp_path / "down.txt").meta["ionbal_warnings"] == []


@pytest.fixture
def small_disk(tmp_path, monkeypatch):
    """A real 2 MB file system (tmpfs) as the working directory; skipped where mounting is not permitted
    (the ENOSPC injections above cover the same paths there)."""
    import subprocess

    d = tmp_path / "small-disk"
    d.mkdir()
    if os.geteuid() != 0:
        pytest.skip("mounting a small file system needs root")
    r = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=2m", "tmpfs", str(d)], capture_output=True, text=True)
    if r.returncode != 0:
        pytest.skip(f"cannot mount a small file system here: {r.stderr.strip()}")
    monkeypatch.chdir(d)
    try:
        yield d
    finally:
        monkeypatch.chdir(tmp_path)
        subprocess.run(["umount", str(d)], check=False)


def _complete_looking(d: Path, keep: str) -> list[str]:
    """Files under d (parts folders included) other than ``keep`` that read as a finished result."""
    found = []
    for p in d.rglob("*"):
        if p.is_file() and p.name != keep and p.suffix in (".h5", ".nc", ".ecsv", ".csv", ".txt"):
            found.append(str(p.relative_to(d)))
    return found


def test_a_real_full_disk_grid_and_column(small_disk, capsys):
    """Issue 15, disk full on a real 2 MB file system: one-line error, the previous complete file of the
    same name untouched, nothing left that looks complete."""
    d = small_disk
    assert main(["grid", *SMALL, "-o", "r.h5"]) == 0
    before = (d / "r.h5").read_bytes()
    capsys.readouterr()
    big = ["-T", "3000:20000:50", "-P", "1e1:1e6:40", "--tile-size", "500", "-q"]  # ~8 MB of results
    line = _one_line_error(capsys, main(["grid", *big, "-o", "r.h5", "--overwrite"]))
    assert "No space left on device" in line, line
    assert (d / "r.h5").read_bytes() == before and is_grid_file(d / "r.h5")
    assert _complete_looking(d, "r.h5") == [], sorted(p.name for p in d.rglob("*"))
    parts = G.parts_dir_for(d / "r.h5")  # tiles finished before the disk filled: kept to resume
    kept = sorted(p.name for p in parts.iterdir()) if parts.exists() else []
    print(f"\nkept to resume after the full disk: {kept}")
    assert all(n.startswith("tile-") or n in ("lock", "spec.json") for n in kept), kept
    free_after_grid = os.statvfs(d).f_bavail * os.statvfs(d).f_frsize
    # a column: a small one fits, a long one (1,000 depth points, every species) does not
    lines = MODEL.read_text().splitlines()
    rows = [ln for ln in lines if ln.strip() and not ln.startswith("#")]
    (d / "m.txt").write_text("\n".join(rows[:3]) + "\n")
    assert main(["column", "m.txt", "-o", "c.ecsv", "-q"]) == 0
    before_c = (d / "c.ecsv").read_bytes()
    data = np.array([[float(x) for x in r.split()] for r in rows[1:]])
    fine = np.linspace(0, len(data) - 1, 1000)
    cols = np.column_stack([np.interp(fine, np.arange(len(data)), data[:, j]) for j in range(data.shape[1])])
    with open(d / "long.txt", "w") as f:
        f.write(rows[0] + "\n")
        np.savetxt(f, cols, fmt="%.6e")
    capsys.readouterr()
    line = _one_line_error(capsys, main(["column", "long.txt", "-o", "c.ecsv", "-q", "--overwrite"]))
    assert "No space left on device" in line, line
    assert (d / "c.ecsv").read_bytes() == before_c
    assert sorted(p.name for p in d.iterdir() if p != parts) == ["c.ecsv", "long.txt", "m.txt", "r.h5"]
    print(f"\nreal 2 MB file system: grid (~8 MB) and column (1,000 points) refused with one line each; previous "
          f"files untouched; {free_after_grid} bytes free after the failed grid (its partial file removed); "
          "bytes lost 0")


def test_ctrl_c_inside_a_finalizer_is_raised_again_after_it():
    """Issue 16, item 3: a Ctrl-C that lands in a weakref callback or ``__del__`` (where Python prints and
    drops any exception) is not raised there but re-armed by a short timer; elsewhere it is raised."""
    import signal
    import sys

    from ionbal import _launch

    seen = {}

    class Finalized:
        def __del__(self):
            seen["inside"] = _launch._in_finalizer(sys._getframe())
            old = _launch._phase[0]
            _launch._phase[0] = _launch.RUNNING
            try:
                seen["returned"] = _launch._on_sigint(signal.SIGINT, sys._getframe()) is None
                seen["timer"] = signal.getitimer(signal.ITIMER_REAL)[0]
            finally:
                signal.setitimer(signal.ITIMER_REAL, 0.0)
                _launch._phase[0] = old

    Finalized()  # freed at once: its __del__ runs here
    # one that Python dropped all the same reaches sys.unraisablehook: not printed, re-armed
    old = _launch._phase[0]
    _launch._phase[0] = _launch.STOPPING
    try:
        hook_args = type("Args", (), {"exc_type": KeyboardInterrupt})()
        assert _launch._unraisable(hook_args) is None
        assert _launch._phase[0] == _launch.RUNNING and signal.getitimer(signal.ITIMER_REAL)[0] > 0
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0.0)
        _launch._phase[0] = old
    assert seen == {"inside": True, "returned": True, "timer": pytest.approx(_launch.RETRY_AFTER, abs=0.005)}
    assert not _launch._in_finalizer(sys._getframe())
    old = _launch._phase[0]
    _launch._phase[0] = _launch.RUNNING
    try:
        with pytest.raises(KeyboardInterrupt):
            _launch._on_sigint(signal.SIGINT, sys._getframe())
    finally:
        _launch._phase[0] = old
