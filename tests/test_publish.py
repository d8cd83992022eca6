"""Publishing a grid (issue 16): the lock is held through the rename, an existing file is never
replaced without overwrite, stale work directories are cleaned, Ctrl-C while assembling is one line."""

from __future__ import annotations

import os
import signal

import pytest

from ionbal import grid as G
from ionbal.cli import main
from ionbal.grid import Axis, GridSpec, run_grid
from ionbal.grid import runner as R
from ionbal.io import is_grid_file, open_grid
from ionbal.io.atomic import atomic_output

SPEC = dict(temperature=Axis.log("temperature", 4000.0, 8000.0, 5), state=Axis.log("gas_pressure", 1e2, 1e5, 4),
            species=("H I", "H II", "Fe I", "Fe II"), tile_size=6)
SMALL = ["-T", "4000:8000:5", "-P", "1e2:1e5:4", "--species", "H I,H II,Fe I,Fe II", "--tile-size", "6", "-q"]


def test_atomic_output_never_replaces_without_overwrite(tmp_path):
    out = tmp_path / "x.txt"
    with pytest.raises(FileExistsError, match="appeared while it was being written"):
        with atomic_output(out, overwrite=False) as tmp:
            tmp.write_text("new")
            out.write_text("precious")  # someone else wrote it meanwhile
    assert out.read_text() == "precious"
    assert [p.name for p in tmp_path.iterdir()] == ["x.txt"]  # no temporary file left
    with atomic_output(out, overwrite=True) as tmp:
        tmp.write_text("new")
    assert out.read_text() == "new"


def test_an_output_that_appears_during_the_run_is_kept(tmp_path, monkeypatch):
    out = tmp_path / "g.h5"
    real = G.compute.compute_tile

    def meanwhile(task):
        if not out.exists():
            out.write_bytes(b"precious")
        return real(task)

    monkeypatch.setattr(G.compute, "compute_tile", meanwhile)
    with pytest.raises(FileExistsError, match="appeared"):
        run_grid(GridSpec(**SPEC), out, progress=False)
    assert out.read_bytes() == b"precious"
    parts = G.parts_dir_for(out)
    assert parts.is_dir() and len(list(parts.glob("tile-*.npz"))) == len(GridSpec(**SPEC).tiles())
    assert not (parts / "assembling.h5").exists()
    monkeypatch.setattr(G.compute, "compute_tile", real)
    run = run_grid(GridSpec(**SPEC), out, progress=False, overwrite=True)
    assert run.tiles_resumed == run.n_tiles and is_grid_file(out) and not parts.exists()


def test_stale_parts_of_a_complete_grid_are_removed(tmp_path):
    out = tmp_path / "g.h5"
    run_grid(GridSpec(**SPEC), out, progress=False, keep_parts=True)  # as if killed before the cleanup
    parts = G.parts_dir_for(out)
    assert parts.is_dir()
    notes = []
    with pytest.raises(FileExistsError, match="already exists"):
        run_grid(GridSpec(**SPEC), out, progress=False, notify=notes.append)
    assert not parts.exists() and any("only duplicated" in n for n in notes)
    assert is_grid_file(out)


def test_parts_of_another_grid_are_not_stale(tmp_path):
    out = tmp_path / "g.h5"
    run_grid(GridSpec(**SPEC), out, progress=False)
    other = dict(SPEC, tile_size=4)
    G.WorkDir(G.parts_dir_for(out), GridSpec(**other)).open()
    assert not G.workdir.remove_stale_parts(out)
    assert G.parts_dir_for(out).is_dir()


@pytest.mark.parametrize("how", ["interrupt", "error caused by an interrupt"])
def test_ctrl_c_while_assembling_is_one_line(tmp_path, monkeypatch, capsys, how):
    monkeypatch.chdir(tmp_path)
    real = R.write_grid_file

    def interrupted(path, *args, **kw):
        path.write_bytes(b"half a file")
        if how == "interrupt":
            raise KeyboardInterrupt
        try:
            raise KeyboardInterrupt
        except KeyboardInterrupt:
            raise RuntimeError("HDF5 error while closing")  # what a library may make of it

    monkeypatch.setattr(R, "write_grid_file", interrupted)
    code = main(["grid", *SMALL, "-o", "r.h5"])
    err = capsys.readouterr().err
    assert code == 130, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "interrupted" in lines[0] and "resume" in lines[0], err
    assert not (tmp_path / "r.h5").exists()
    assert not (G.parts_dir_for(tmp_path / "r.h5") / "assembling.h5").exists()
    monkeypatch.setattr(R, "write_grid_file", real)
    assert main(["grid", *SMALL, "-o", "r.h5"]) == 0
    with open_grid(tmp_path / "r.h5") as g:
        assert g.status_counts()["ok"] == 20


def test_ctrl_c_during_the_rename_is_held_off(tmp_path, monkeypatch):
    out = tmp_path / "g.h5"
    real = R.publish

    def publish_with_ctrl_c(tmp, path, **kw):
        os.kill(os.getpid(), signal.SIGINT)
        real(tmp, path, **kw)

    monkeypatch.setattr(R, "publish", publish_with_ctrl_c)
    notes = []
    run = run_grid(GridSpec(**SPEC), out, progress=False, notify=notes.append)
    assert is_grid_file(out) and run.n_points == 20
    assert not G.parts_dir_for(out).exists()
    assert any("interrupt received while publishing" in n for n in notes)
    assert signal.getsignal(signal.SIGINT) is signal.default_int_handler
