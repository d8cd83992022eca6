"""The grid, info and column commands, in-process; clean one-line errors (with a fuzz test)."""

from __future__ import annotations

import os
import random
from pathlib import Path

import numpy as np
import pytest

from ionbal.cli import main
from ionbal.grid import parts_dir_for

EXAMPLE = Path(__file__).resolve().parents[1] / "examples" / "vessa7-model.txt"
SMALL = ["-T", "4000:8000:6", "-P", "1e2:1e5:5", "--species", "H-,H I,Fe I,Fe II", "-q"]


def run(capsys, *args):
    code = main([str(a) for a in args])
    out, err = capsys.readouterr()
    return code, out, err


def assert_clean_error(code, err, *needles):
    assert code != 0
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("ionbal"), err
    assert "Traceback" not in err
    for n in needles:
        assert n in lines[0], (n, lines[0])


@pytest.fixture
def in_tmp(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    return tmp_path


# --------------------------------------------------------------------------------------------------
# happy paths
# --------------------------------------------------------------------------------------------------

def test_help_of_every_command(capsys):
    for cmd in ("grid", "info", "column"):
        with pytest.raises(SystemExit) as exc:
            main([cmd, "--help"])
        assert exc.value.code == 0
        out = capsys.readouterr().out
        assert out.startswith(f"usage: ionbal {cmd}")


def test_grid_info_roundtrip(in_tmp, capsys):
    code, out, err = run(capsys, "grid", *SMALL, "-o", "small.h5")
    assert code == 0, err
    assert "wrote small.h5" in out and "30 of 30" in out and "points/s" in out
    assert (in_tmp / "small.h5").exists() and not parts_dir_for(in_tmp / "small.h5").exists()
    code, out, err = run(capsys, "info", "small.h5", "--verify", "--species")
    assert code == 0, err
    assert "axis temperature" in out and "4000 to 8000 K" in out and "species: H-, H I, Fe I, Fe II" in out
    assert "made by" in out and "ionbal grid -T 4000:8000:6" in out
    assert "checksums" in out


def test_grid_default_output_name_and_refusal(in_tmp, capsys):
    code, out, err = run(capsys, "grid", *SMALL)
    assert code == 0, err
    path = in_tmp / "ionbal-grid.h5"
    before = path.read_bytes()
    code, out, err = run(capsys, "grid", *SMALL)
    assert_clean_error(code, err, "already exists", "--overwrite")
    assert path.read_bytes() == before
    code, out, err = run(capsys, "grid", *SMALL, "-T", "4000:8000:7", "--overwrite")
    assert code == 0, err
    assert path.read_bytes() != before


def test_grid_composition_axes_and_options(in_tmp, capsys):
    code, out, err = run(capsys, "grid", *SMALL, "--metallicity-axis", "-2,-1,0", "--alpha-axis", "0,0.4",
                         "--abundance", "He=11.0", "--float32", "--number-densities", "--tile-size", "7",
                         "--no-validity", "-o", "comp.h5")
    assert code == 0, err
    import ionbal.io as gio

    with gio.open_grid("comp.h5") as g:
        assert g.shape == (3, 2, 6, 5)
        assert "number_density" in g.variables and "validity" not in g.variables
        assert g.abundances[0, 0, list(g.elements).index("He")] == 11.0
    code, out, err = run(capsys, "grid", "-T", "4000:8000:6", "-e", "1e-3:1e0:4", "--species", "Fe II", "-q",
                         "-o", "pe.h5")
    assert code == 0, err
    with gio.open_grid("pe.h5") as g:
        assert g.state_variable == "electron_pressure"


def test_grid_resumes_after_interruption(in_tmp, capsys, monkeypatch):
    import ionbal.grid as G

    real = G.compute_tile
    calls = {"n": 0}

    def flaky(task):
        calls["n"] += 1
        if calls["n"] > 2:
            raise KeyboardInterrupt
        return real(task)

    monkeypatch.setattr(G.compute, "compute_tile", flaky)
    code, out, err = run(capsys, "grid", *SMALL, "--tile-size", "6", "-o", "r.h5")
    assert code == 130 and "interrupted" in err and "r.h5.parts" in err and "resume" in err
    assert not (in_tmp / "r.h5").exists()
    monkeypatch.setattr(G.compute, "compute_tile", real)
    args = [a for a in SMALL if a != "-q"]
    code, out, err = run(capsys, "grid", *args, "--tile-size", "6", "-o", "r.h5")
    assert code == 0 and "resuming: 2 of" in err and "2 resumed" in out
    # a different grid on the same output: refused while its parts exist
    calls["n"] = 0
    monkeypatch.setattr(G.compute, "compute_tile", flaky)
    run(capsys, "grid", *SMALL, "--tile-size", "6", "-o", "s.h5")
    monkeypatch.setattr(G.compute, "compute_tile", real)
    code, out, err = run(capsys, "grid", *SMALL, "--tile-size", "5", "-o", "s.h5")
    assert_clean_error(code, err, "different grid", "--discard-parts")
    code, out, err = run(capsys, "grid", *SMALL, "--tile-size", "5", "-o", "s.h5", "--discard-parts")
    assert code == 0, err


def test_column_command(in_tmp, capsys):
    code, out, err = run(capsys, "column", EXAMPLE, "--metallicity", "-1.5", "--alpha", "0.4",
                         "-o", "v.ecsv", "-o", "v.h5")
    assert code == 0, err
    assert "wrote v.ecsv" in out and "wrote v.h5" in out
    assert "electron_pressure: ionbal vs input" in out and "median |deviation|" in out and "dex" in out
    assert "P_e input" in out  # per-depth listing
    assert (in_tmp / "v.ecsv").exists() and (in_tmp / "v.h5").exists()
    code, out, err = run(capsys, "column", EXAMPLE, "-q")
    assert code == 0 and (in_tmp / "vessa7-model.ionbal.ecsv").exists()
    assert "P_e input" not in out
    code, out, err = run(capsys, "column", EXAMPLE, "-o", "v.ecsv")
    assert_clean_error(code, err, "already exists")


# --------------------------------------------------------------------------------------------------
# errors: one line, non-zero exit, nothing touched
# --------------------------------------------------------------------------------------------------

@pytest.mark.parametrize("args, needle", [
    (["grid", "-T", "abc"], "temperature axis"),
    (["grid", "-T", "100:1000:5"], "outside the partition-function tables"),
    (["grid", "-P", "1e5:1e2:5"], "must increase"),
    (["grid", "-P", "1:2", ], "START:STOP:NUM"),
    (["grid", "-P", "1e2:1e4:3", "-e", "1:2:3"], "only one state axis"),
    (["grid", "--tile-size", "0"], "tile_size"),
    (["grid", "--workers", "0"], "workers"),
    (["grid", "--species", "Xx II"], "cannot parse species"),
    (["grid", "--only", "H,He", "--species", "Fe II"], "not in the mixture"),
    (["grid", "--metallicity", "-1", "--metallicity-axis", "-2,-1"], "not both"),
    (["grid", "--abundance", "He11"], "EL=A"),
    (["grid", "--abundance-set", "XYZ"], "unknown solar mixture"),
    (["grid", "-o", "no/such/dir/g.h5"], "does not exist"),
    (["grid", "--scheduler", "tcp://1.2.3.4:1", "--local-cluster"], "not both"),
    (["grid", "--bogus"], "unrecognized arguments"),
    (["info"], "required"),
    (["info", "missing.h5"], "does not exist"),
    (["column"], "required"),
    (["column", "missing.txt"], "does not exist"),
    (["column", "model.txt", "-o", "out.fits"], "unknown extension"),
    (["column", "model.txt", "-o", "ok.ecsv", "-o", "out.fits"], "unknown extension"),
    (["column", "model.txt", "-o", "ok.ecsv", "-o", "no/dir/x.h5"], "does not exist"),
    (["column", "model.txt", "--state", "hydrogen_density"], "no hydrogen_density column"),
    (["column", "model.txt", "-o", "a.ecsv", "-o", "a.ecsv"], "given twice"),
    (["nonsense"], "invalid choice"),
])
def test_clean_errors(in_tmp, capsys, args, needle):
    (in_tmp / "model.txt").write_text("temperature gas_pressure\n5000 1e4\n")
    code, out, err = run(capsys, *args)
    assert_clean_error(code, err, needle)
    assert sorted(p.name for p in in_tmp.iterdir()) == ["model.txt"]  # nothing written


def test_info_on_damaged_files(in_tmp, capsys):
    code, out, err = run(capsys, "grid", *SMALL, "-o", "g.h5")
    assert code == 0
    raw = (in_tmp / "g.h5").read_bytes()
    (in_tmp / "cut.h5").write_bytes(raw[: len(raw) // 2])
    assert_clean_error(*run(capsys, "info", "cut.h5")[::2], "truncated or damaged")
    (in_tmp / "text.h5").write_text("not hdf5")
    assert_clean_error(*run(capsys, "info", "text.h5")[::2], "not an HDF5 file")
    assert_clean_error(*run(capsys, "info", in_tmp)[::2], "directory")


def test_debug_shows_the_traceback(in_tmp):
    with pytest.raises(FileNotFoundError):
        main(["--debug", "info", "missing.h5"])


# --------------------------------------------------------------------------------------------------
# fuzz: a few hundred malformed model files and argument lists
# --------------------------------------------------------------------------------------------------

GOOD_MODEL = (
    "# invented test structure\n"
    "log_tau temperature gas_pressure electron_pressure\n"
    "-3.0 4100.0 3.0e3 0.05\n"
    "-2.0 4500.0 1.2e4 0.2\n"
    "-1.0 5200.0 4.0e4 1.5\n"
    "0.0 6300.0 9.0e4 20.0\n"
)
JUNK = ["abc", "nan", "-5", "inf", "-inf", "1e999", "0", "--", "1,2", "\x00", "1e-400", "0x10"]


def _malformed_models(rng: random.Random, n: int):
    """Texts that are each invalid by construction (a description and the text)."""
    lines = GOOD_MODEL.splitlines()
    header = lines[1].split()
    out = []
    for i in range(n):
        kind = i % 12
        body = [ln.split() for ln in lines[2:]]
        if kind == 0:  # a required column misnamed (rows keep the same width)
            h = list(header)
            if rng.random() < 0.5:
                h[1] = rng.choice(["Teff", "Tgas", "x", "tau"])  # not aliases of temperature (ionbal.io.models.ALIASES)
            else:  # no state column left at all
                h[2], h[3] = rng.choice(["ptot", "P_turb", "q"]), rng.choice(["pel", "e_p", "elec_p"])  # no aliases
            text = " ".join(h) + "\n" + "\n".join(" ".join(r) for r in body)
        elif kind == 1:  # a bad temperature or pressure value
            r = rng.randrange(len(body))
            body[r][rng.choice([1, 2])] = rng.choice(JUNK)
            text = " ".join(header) + "\n" + "\n".join(" ".join(r) for r in body)
            if "\x00" in text:
                text = text.replace("\x00", "")  # the NUL case is covered by kind 4
                body[r][1] = "abc"
                text = " ".join(header) + "\n" + "\n".join(" ".join(rr) for rr in body)
        elif kind == 2:  # a row with a missing or an extra field
            r = rng.randrange(len(body))
            if rng.random() < 0.5:
                body[r].pop(rng.randrange(len(body[r])))
            else:
                body[r].insert(rng.randrange(len(body[r]) + 1), "7")
            text = " ".join(header) + "\n" + "\n".join(" ".join(r) for r in body)
        elif kind == 3:  # header only, or comments only, or blank
            text = rng.choice([" ".join(header) + "\n", "# nothing\n# here\n", "", "\n\n  \n"])
        elif kind == 4:  # binary junk
            text = bytes(rng.randrange(256) for _ in range(rng.randint(1, 200))) + b"\x00"
        elif kind == 5:  # duplicated column
            h = list(header)
            h[3] = h[rng.choice([1, 2])]
            text = " ".join(h) + "\n" + "\n".join(" ".join(r) for r in body)
        elif kind == 6:  # a header of numbers
            text = "\n".join(" ".join(r) for r in body)
        elif kind == 7:  # ECSV with a broken YAML header
            text = "# %ECSV 1.0\n# ---\n# datatype: [" + "x" * rng.randint(0, 20) + "\n" + GOOD_MODEL
        elif kind == 8:  # ECSV with a pressure in a unit that does not convert
            unit = rng.choice(["s", "m", "kg", "K", "erg"])
            text = ("# %ECSV 1.0\n# ---\n# datatype:\n# - {name: temperature, unit: K, datatype: float64}\n"
                    f"# - {{name: gas_pressure, unit: {unit}, datatype: float64}}\n# schema: astropy-2.0\n"
                    "temperature gas_pressure\n5000.0 1.0e4\n")
        elif kind == 9:  # temperatures outside the tables
            r = rng.randrange(len(body))
            body[r][1] = rng.choice(["10", "100", "2e6", "1e9"])
            text = " ".join(header) + "\n" + "\n".join(" ".join(r) for r in body)
        elif kind == 10:  # CSV with a wrong field count
            text = ",".join(header) + "\n" + "\n".join(",".join(r[: rng.randint(1, 3)]) for r in body)
        else:  # truncated in the middle of a row, plus a junk value in another
            text = " ".join(header) + "\n" + "\n".join(" ".join(r) for r in body)
            text = text[: rng.randint(len(text) // 2, len(text) - 2)]
            text = text.replace("4500.0", "45x0.0").replace("4100.0", "4q00")
        out.append((kind, text))
    return out


@pytest.fixture
def no_computing(monkeypatch):
    """Every fuzz case must fail before any tile is computed; a case that starts computing is stopped and noted."""
    import ionbal.grid as G

    started = []

    def refuse(task):
        started.append(task)
        raise KeyboardInterrupt

    monkeypatch.setattr(G.compute, "compute_tile", refuse)
    return started


def test_fuzz_malformed_models(in_tmp, capsys):
    rng = random.Random(12345)
    cases = _malformed_models(rng, 240)
    for i, (kind, text) in enumerate(cases):
        p = in_tmp / f"m{i}.txt"
        if isinstance(text, bytes):
            p.write_bytes(text)
        else:
            p.write_text(text)
        code, out, err = run(capsys, "column", p, "-o", f"out{i}.ecsv")
        assert code != 0, (kind, text)
        lines = err.strip().splitlines()
        assert len(lines) == 1 and "Traceback" not in err, (kind, text, err)
        assert not (in_tmp / f"out{i}.ecsv").exists()
    assert len(cases) == 240


def test_fuzz_argument_lists(in_tmp, capsys, no_computing):
    rng = random.Random(99)
    (in_tmp / "model.txt").write_text(GOOD_MODEL)
    (in_tmp / "junk.h5").write_bytes(os.urandom(300))
    bad_values = {
        "-T": ["", ":", "1:2:3:4:5", "a:b:c", "5000:4000:3", "3000:9000:-1", "1e9:2e9:3", "0,1", "4000,4000"],
        "-P": ["", "x", "1e2:1e1:3", "-1:5:3", "1e2:1e3:0", "nan,1", "1e2:1e3:2:cubic"],
        "--tile-size": ["0", "-3", "x", "1.5"],
        "--workers": ["0", "-1", "many"],
        "--species": ["", "Fe XXX", "Zz I", "Fe II,Fe II", "H--", ","],
        "--abundance": ["Fe", "Fe=x", "Xx=7", "Fe=99", "=1"],
        "--abundance-set": ["", "sun", "AGSS"],
        "--metallicity-axis": ["", "a,b", "0,-1", "-20,0", "1:0:3"],
        "--alpha-axis": ["x", "0.4,0.2", "50"],
        "--only": ["Qq", "H,Zz"],
        "--executor": ["dask", "processes"],
    }
    valid = [["-q"], ["--float32"], ["--number-densities"], ["--no-validity"], ["-T", "4000:6000:3"],
             ["-P", "1e3:1e4:2"], ["--tile-size", "4"], ["--species", "Fe II"]]
    cases = []
    for i in range(160):
        option = rng.choice(sorted(bad_values))
        bad = [option, rng.choice(bad_values[option])]
        others = [v for v in rng.sample(valid, rng.randint(0, 3)) if v[0] != option]
        parts = others + [bad]
        rng.shuffle(parts)
        cases.append(["grid", "-o", f"g{i}.h5"] + [a for p in parts for a in p])
    for _ in range(40):
        cases.append(rng.choice([["info", "junk.h5"], ["info", "nothing.h5"], ["info", "model.txt"],
                                 ["column", "model.txt", "--state", "mass_density"],
                                 ["column", "model.txt", "-o", "x.fits"], ["column", "junk.h5"],
                                 ["state", "-T", "abc"], ["grid", "--tile-size"], ["column", "model.txt",
                                                                                   "--species", "Fe 9"]]))
    for args in cases:
        code, out, err = run(capsys, *args)
        assert not no_computing, args
        assert code != 0, args
        lines = err.strip().splitlines()
        assert len(lines) == 1 and "Traceback" not in err, (args, err)
    leftovers = sorted(p.name for p in in_tmp.iterdir())
    assert leftovers == ["junk.h5", "model.txt"]
