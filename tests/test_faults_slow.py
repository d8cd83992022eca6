"""Fault injection against real processes (issues 16 and 15): races, kills and Ctrl-C at random moments.

Every check runs ``ionbal`` as a separate process (the installed command line), kills or races it, and
then looks at what is left under the output path: nothing, or a complete grid file whose every dataset
is bitwise equal to an uninterrupted run.  Each test prints its figures (trials, outcomes, bytes lost).
Run with ``pytest -m faults tests/test_faults_slow.py -s`` (the installed ``ionbal`` console script beside
the running Python is what is started, so the Ctrl-C handling of the real entry point is tested).
"""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import h5py
import numpy as np
import pytest

import ionbal
from ionbal.grid import parts_dir_for
from ionbal.io import is_grid_file

#: long campaigns of real processes (about 40 minutes with the default trial counts): run on demand
#: with ``pytest -m faults`` (IONBAL_RACE_TRIALS / IONBAL_KILL_TRIALS / IONBAL_CTRLC_TRIALS set the counts), not by CI
pytestmark = pytest.mark.faults

#: the grid of the issue's measurement (201 x 161, 12 tiles) and a different, small one
MEDIUM = ["-T", "3000:20000:201", "-P", "1e1:1e6:161", "--tile-size", "3000", "-q"]
SMALL = ["-T", "4000:8000:3", "-P", "1e2:1e5:4", "-q"]
RNG = random.Random(16)
_SIG_NAME = lambda s: signal.Signals(s).name  # noqa: E731 - readable test ids
#: the installed console script (the entry point users run: its Ctrl-C handler comes first)
IONBAL = str(Path(sys.executable).with_name("ionbal"))


def _start(args, cwd) -> subprocess.Popen:
    env = dict(os.environ, NUMBA_NUM_THREADS=os.environ.get("NUMBA_NUM_THREADS", "2"))
    return subprocess.Popen([IONBAL, *args], cwd=cwd, env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)


def _run(args, cwd) -> tuple[int, str]:
    p = _start(args, cwd)
    _, err = p.communicate(timeout=600)
    return p.returncode, err


#: Ctrl-C that arrived while Python itself was starting (its ``site`` set-up, before the console
#: script imports ionbal): no ionbal code has run, nothing of ours is on the stack; counted, not hidden
STARTUP_INTERRUPTS = {"count": 0}


def _interpreter_start_up(err: str) -> bool:
    """A traceback of Python's own start-up: ends in KeyboardInterrupt, no frame in ionbal's files."""
    pkg = str(Path(ionbal.__file__).parent) + os.sep
    files = [ln.split('"')[1] for ln in err.splitlines() if ln.lstrip().startswith('File "')]
    return err.rstrip().endswith("KeyboardInterrupt") and not any(f.startswith(pkg) for f in files)


def _no_traceback(err: str, sig) -> None:
    """No traceback, except one of Python's own start-up (counted); any ionbal frame fails the test."""
    if "Traceback" not in err and "Exception ignored" not in err:
        return
    assert sig == signal.SIGINT and _interpreter_start_up(err), err
    STARTUP_INTERRUPTS["count"] += 1


def _sigint_outcome(code: int, err: str) -> None:
    """Ctrl-C: finished (0), or the one line and 130; killed before Python set its handler: -2."""
    if "Traceback" in err:
        return
    assert code in (0, 130, -signal.SIGINT), (code, err)
    if code == 130:
        lines = err.strip().splitlines()
        assert lines[-1].startswith("ionbal: interrupted"), err
        # the one line, after at most the first-run note that the kernels are being compiled
        assert all(ln.startswith("ionbal: compiling kernels") for ln in lines[:-1]), err


def _datasets(path: Path) -> dict[str, bytes]:
    out = {}
    with h5py.File(path, "r") as f:
        def visit(name, obj):
            if isinstance(obj, h5py.Dataset):
                a = obj[()]
                out[name] = (a.dtype.str, a.shape,
                             np.ascontiguousarray(a).tobytes() if a.dtype != object else repr(a.tolist()))
        f.visititems(visit)
    return out


def _t_length(path: Path) -> int:
    with h5py.File(path, "r") as f:
        return int(f["temperature"].shape[0])


@pytest.fixture(scope="module")
def medium(tmp_path_factory):
    """An uninterrupted medium run (the reference) and a copy of its finished tiles (a template)."""
    d = tmp_path_factory.mktemp("medium")
    code, err = _run(["grid", *MEDIUM, "-o", "ref.h5", "--keep-parts"], d)
    assert code == 0, err
    return d / "ref.h5", _datasets(d / "ref.h5"), parts_dir_for(d / "ref.h5")


def _parts_from(template: Path, out: Path) -> None:
    """A work directory of ``out`` holding every finished tile (hard links: cheap, and read only)."""
    parts = parts_dir_for(out)
    parts.mkdir()
    for p in template.iterdir():
        if p.name != "lock":
            os.link(p, parts / p.name)


def _leftovers(d: Path, out: Path) -> list[str]:
    return sorted(p.name for p in d.iterdir() if p.name != out.name)


def test_race_second_run_never_replaces_a_result(medium, tmp_path):
    """Issue 16.1: a second run with another grid, started while the first is writing its final file."""
    _, ref, template = medium
    n = int(os.environ.get("IONBAL_RACE_TRIALS", "100"))
    outcomes = {"first published, second refused": 0, "second published, first refused": 0}
    for trial in range(n):
        d = tmp_path / f"t{trial}"
        d.mkdir()
        out = d / "g.h5"
        _parts_from(template, out)
        a = _start(["grid", *MEDIUM, "-o", out.name], d)
        time.sleep(RNG.uniform(0.2, 2.5))
        b = _start(["grid", *SMALL, "-o", out.name], d)
        _, err_a = a.communicate(timeout=600)
        _, err_b = b.communicate(timeout=600)
        assert not (a.returncode == 0 and b.returncode == 0), (trial, err_a, err_b)
        assert "Traceback" not in err_a + err_b
        assert out.is_file() and is_grid_file(out), (trial, err_a, err_b)
        if a.returncode == 0:
            assert _t_length(out) == 201 and _datasets(out) == ref, trial
            outcomes["first published, second refused"] += 1
        else:
            assert b.returncode == 0 and _t_length(out) == 3, (trial, err_a, err_b)
            outcomes["second published, first refused"] += 1
        for p in (a, b):
            assert p.returncode in (0, 2), (p.returncode, err_a, err_b)
    print(f"\nrace: {n} trials, {outcomes}, results replaced without --overwrite: 0")


@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGTERM, signal.SIGINT], ids=_SIG_NAME)
def test_kills_around_publishing_then_resume(medium, tmp_path, sig):
    """Issue 16.2/16.3: a kill while assembling, renaming or cleaning up; the rerun finishes or cleans."""
    _, ref, template = medium
    n = int(os.environ.get("IONBAL_KILL_TRIALS", "20"))
    tally = {"nothing": 0, "complete": 0}
    for trial in range(n):
        d = tmp_path / f"k{trial}"
        d.mkdir()
        out = d / "g.h5"
        _parts_from(template, out)
        p = _start(["grid", *MEDIUM, "-o", out.name], d)
        time.sleep(RNG.uniform(0.3, 3.0))
        p.send_signal(sig)
        _, err = p.communicate(timeout=600)
        _no_traceback(err, sig)
        if sig == signal.SIGINT:
            _sigint_outcome(p.returncode, err)
        if out.exists():  # published: complete and identical
            assert _datasets(out) == ref, trial
            tally["complete"] += 1
        else:
            tally["nothing"] += 1
        existed = out.exists()
        code, err = _run(["grid", *MEDIUM, "-o", out.name], d)
        if existed:  # refused, but the stale parts beside the complete file are removed
            assert code == 2 and "already exists" in err, err
        else:  # resumed from the parts
            assert code == 0, err
        assert _datasets(out) == ref, trial
        assert _leftovers(d, out) == [], (trial, _leftovers(d, out))  # no parts, no temporary files
    print(f"\n(Ctrl-C during Python's start-up imports so far: {STARTUP_INTERRUPTS['count']})")
    print(f"\n{signal.Signals(sig).name} around publishing: {n} kills survived, after the kill the output held "
          f"{tally}; every final file bitwise equal to the uninterrupted run; bytes lost 0")


SMALL_MANY_TILES = ["-T", "3000:12000:60", "-P", "1e1:1e6:40", "--tile-size", "100", "-q"]


@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGTERM, signal.SIGINT], ids=_SIG_NAME)
def test_grid_killed_at_random_moments_resumes_to_the_same_bits(tmp_path, sig):
    """Issue 15: >= 20 kills at random moments of one grid (computing, assembling, renaming), resumed."""
    ref_dir = tmp_path / "ref"
    ref_dir.mkdir()
    t0 = time.monotonic()
    code, err = _run(["grid", *SMALL_MANY_TILES, "-o", "ref.h5"], ref_dir)
    assert code == 0, err
    span = 1.1 * (time.monotonic() - t0)  # kill moments cover the whole run, assembling and renaming too
    ref = _datasets(ref_dir / "ref.h5")
    d = tmp_path / "run"
    d.mkdir()
    out = d / "g.h5"
    kills = 0
    checks = 0
    while kills < 20:
        p = _start(["grid", *SMALL_MANY_TILES, "-o", out.name], d)
        time.sleep(RNG.uniform(0.2, span))
        if p.poll() is not None:  # finished before the kill: start over from nothing
            assert p.returncode == 0, p.stderr.read()
            assert _datasets(out) == ref
            out.unlink()
            continue
        p.send_signal(sig)
        _, err = p.communicate(timeout=600)
        kills += 1
        _no_traceback(err, sig)
        if sig == signal.SIGINT:
            _sigint_outcome(p.returncode, err)
        if out.exists():
            assert _datasets(out) == ref
            checks += 1
            out.unlink()  # and go on killing runs from the start
    code, err = _run(["grid", *SMALL_MANY_TILES, "-o", out.name], d)
    assert code == 0, err
    assert _datasets(out) == ref and _leftovers(d, out) == []
    print(f"\n(Ctrl-C during Python's start-up imports so far: {STARTUP_INTERRUPTS['count']})")
    print(f"\n{signal.Signals(sig).name}: {kills} kills of 'ionbal grid' survived ({checks} left a complete file, "
          "the rest nothing under the output path); final file bitwise equal; bytes lost 0")


def _long_model(path: Path, rows: int = 1000) -> Path:
    """The invented Vessa-7 structure of the examples, interpolated to ``rows`` depth points (a longer
    run: kills land while importing, solving and writing)."""
    from astropy.io import ascii

    t = ascii.read(Path(__file__).resolve().parents[1] / "examples" / "vessa7-model.txt")
    x = np.linspace(t["log_tau"][0], t["log_tau"][-1], rows)
    cols = np.column_stack([np.interp(x, t["log_tau"], t[c]) for c in t.colnames])
    with open(path, "w") as f:
        f.write("# Vessa-7 (invented), interpolated for the fault tests\n" + " ".join(t.colnames) + "\n")
        np.savetxt(f, cols, fmt="%.7e")
    return path


def _column_outputs(d: Path, outs) -> dict:
    got = {}
    for o in outs:
        f = d / o
        if f.exists():
            got[o] = ([ln for ln in f.read_text().splitlines() if not ln.startswith("# ")]  # history line
                      if o.endswith(".ecsv") else _datasets(f))
    return got


@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGTERM, signal.SIGINT], ids=_SIG_NAME)
def test_column_killed_at_random_moments(tmp_path, sig):
    """Issue 15: ``ionbal column`` killed at >= 20 moments over its whole run (start-up, reading, solving,
    writing, renaming): each output absent or complete; the run after each kill equals an uninterrupted run."""
    model = _long_model(tmp_path / "long-model.txt")
    ref_dir = tmp_path / "ref"
    ref_dir.mkdir()
    outs = ["c.ecsv", "c.h5"]
    args = ["column", str(model), *sum((["-o", o] for o in outs), []), "-q"]
    t0 = time.monotonic()
    code, err = _run(args, ref_dir)
    assert code == 0, err
    span = 1.1 * (time.monotonic() - t0)
    ref = _column_outputs(ref_dir, outs)
    ecsv_lines = len(ref["c.ecsv"])
    d = tmp_path / "run"
    d.mkdir()
    tally = {"no output": 0, "one output complete": 0, "both complete": 0}
    moments = []
    for k in range(int(os.environ.get("IONBAL_KILL_TRIALS", "20"))):
        for o in outs:
            (d / o).unlink(missing_ok=True)
        p = _start(args, d)
        moments.append(RNG.uniform(0.05, span))
        time.sleep(moments[-1])
        p.send_signal(sig)
        _, err = p.communicate(timeout=600)
        _no_traceback(err, sig)
        if sig == signal.SIGINT:
            _sigint_outcome(p.returncode, err)
        got = _column_outputs(d, outs)
        for o, v in got.items():  # complete, never partial
            if o.endswith(".ecsv"):
                assert len(v) == ecsv_lines and v == ref[o], (k, o)
            else:
                assert v == ref[o], (k, o)
        assert [q.name for q in d.iterdir() if q.name not in outs] == [], k  # no temporary file left
        tally[["no output", "one output complete", "both complete"][len(got)]] += 1
        code, err = _run([*args, "--overwrite"], d)  # run again to completion: the same as uninterrupted
        assert code == 0, err
        assert _column_outputs(d, outs) == ref, k
    print(f"\n{signal.Signals(sig).name}: {len(moments)} kills of 'ionbal column' (1,000 depth points) at "
          f"{min(moments):.2f}-{max(moments):.2f} s of a {span / 1.1:.1f} s run survived; after the kill {tally}, "
          "no partial or temporary file; every rerun equal to the uninterrupted run; bytes lost 0")


def test_ctrl_c_at_every_moment_of_a_run(tmp_path):
    """Issue 16.3: Ctrl-C at random moments from the process start (Python importing the command line,
    numpy, astropy, numba) to its end gives the one line and 130, or a finished run (0); never a traceback
    of ionbal's code.  Kills land over the whole measured run time of 'ionbal state' and 'ionbal grid'."""
    n = int(os.environ.get("IONBAL_CTRLC_TRIALS", "40"))
    commands = {"state": ["state", "-T", "5000", "-P", "1e4"], "grid": ["grid", *SMALL, "-o", "g.h5"]}
    spans = {}
    for name, args in commands.items():
        d = tmp_path / f"ref-{name}"
        d.mkdir()
        t0 = time.monotonic()
        code, err = _run(args, d)
        assert code == 0, err
        spans[name] = 1.1 * (time.monotonic() - t0)
    before = STARTUP_INTERRUPTS["count"]
    tally = {"finished (0)": 0, "one line, 130": 0, "before Python's handler (-2)": 0,
             "traceback of Python's own start-up": 0}
    for trial in range(n):
        name = "state" if trial % 2 == 0 else "grid"
        d = tmp_path / f"c{trial}"
        d.mkdir()
        p = _start(commands[name], d)
        time.sleep(RNG.uniform(0.0, spans[name]))
        p.send_signal(signal.SIGINT)
        out, err = p.communicate(timeout=600)
        if "Traceback" in err or "Exception ignored" in err:
            _no_traceback(err, signal.SIGINT)
            tally["traceback of Python's own start-up"] += 1
            continue
        _sigint_outcome(p.returncode, err)
        tally[{0: "finished (0)", 130: "one line, 130"}.get(p.returncode, "before Python's handler (-2)")] += 1
        if name == "state" and p.returncode == 0:
            assert "Fe" in out
        if name == "grid":
            g = d / "g.h5"
            assert not g.exists() or is_grid_file(g), trial
            if p.returncode == 0:
                assert g.exists() and _leftovers(d, g) == [], trial
            if not g.exists() or _leftovers(d, g):  # resume, or clean the parts beside a complete file
                existed = g.exists()
                code, err = _run(commands[name], d)
                assert code == (2 if existed else 0), (trial, err)
            assert is_grid_file(g) and _leftovers(d, g) == [], trial
    assert STARTUP_INTERRUPTS["count"] - before == tally["traceback of Python's own start-up"]
    print(f"\nCtrl-C at {n} random moments of whole runs ('ionbal state' {spans['state']:.1f} s, 'ionbal grid' "
          f"{spans['grid']:.1f} s incl. start-up): {tally}; tracebacks of ionbal's code 0; grid outputs "
          "absent or complete, reruns complete; bytes lost 0")
