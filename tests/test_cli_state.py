"""The `ionbal state` command, run in-process."""

from __future__ import annotations

import pytest

from ionbal.cli import main


def test_state_summary(capsys):
    assert main(["state", "-T", "5800", "-P", "1e5"]) == 0
    out = capsys.readouterr().out
    assert "n_e" in out and "P_e" in out and "mu" in out and "rho" in out
    # every element of the default mixture has a line with its dominant stage
    assert "\n  Fe       Fe II" in out
    assert "\n  H        H I" in out


@pytest.mark.parametrize("flag", ["--mass-density", "--hydrogen-density", "--electron-pressure"])
def test_state_other_inputs(capsys, flag):
    value = {"--mass-density": "3e-7", "--hydrogen-density": "1e17", "--electron-pressure": "10"}[flag]
    assert main(["state", "-T", "6000", flag, value, "--elements", "H,Fe"]) == 0
    out = capsys.readouterr().out
    assert "Fe" in out and "converged" in out


def test_state_mixture_options(capsys):
    assert main(["state", "-T", "4500", "-P", "1e4", "--metallicity", "-2", "--alpha", "0.4",
                 "--abundance", "He=11.0", "--only", "H,He,Na,Mg,Fe"]) == 0
    out = capsys.readouterr().out
    assert "(5 elements)" in out


@pytest.mark.parametrize("argv, fragment", [
    (["state", "-T", "5800"], "exactly one"),
    (["state", "-T", "5800", "-P", "1e5", "-e", "10"], "exactly one"),
    (["state", "-T", "-5", "-P", "1e5"], "temperature"),
    (["state", "-T", "5800", "-P", "1e5", "--abundance-set", "XX"], "XX"),
    (["state", "-T", "5800", "-P", "1e5", "--abundance", "Fe"], "EL=A"),
    (["state", "-T", "5800", "-P", "1e5", "--elements", "Xx"], "Xx"),
    (["state", "-T", "abc", "-P", "1e5"], "invalid float"),
    (["nonsense"], "invalid choice"),
])
def test_state_errors_are_one_line(capsys, argv, fragment):
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert fragment in err


def test_help(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["state", "--help"])
    assert exc.value.code == 0
    assert "--gas-pressure" in capsys.readouterr().out


def test_state_shows_validity_cautions(capsys):
    # 20,000 K and 1e12 dyn cm^-2: Debye lowering and pressure ionization matter (ionbal.validity)
    # atoms only: these thresholds were set for the atoms-only balance (with molecules: see the report of issue 10)
    assert main(["state", "-T", "20000", "-P", "1e12", "--elements", "H", "--no-molecules"]) == 0
    out = capsys.readouterr().out
    assert "CAUTION: 2 flag(s) raised" in out
    assert "debye_lowering" in out and "pressure_ionization" in out
    assert main(["state", "-T", "5800", "-P", "1e5", "--elements", "H"]) == 0
    assert "no flag raised" in capsys.readouterr().out


def test_state_json(capsys):
    import json

    import ionbal

    assert main(["state", "-T", "20000", "-P", "1e12", "--elements", "H,Fe", "--json"]) == 0
    rec = json.loads(capsys.readouterr().out)
    r = ionbal.solve(20000.0, gas_pressure=1e12)
    assert rec["electron_density"] == pytest.approx(float(r.electron_density), rel=1e-14)
    assert rec["units"]["electron_density"] == "cm-3"
    assert rec["validity"]["flags"]["debye_lowering"] and not rec["validity"]["trustworthy"]
    assert rec["fractions"]["Fe II"] == pytest.approx(float(r.fraction("Fe II")), rel=1e-14)
    assert set(rec["fractions"]) == {"H-", "H I", "H II"} | {f"Fe {k}" for k in
                                                             ("I II III IV V VI VII VIII IX X XI XII XIII "
                                                              "XIV XV XVI XVII XVIII XIX XX XXI XXII XXIII "
                                                              "XXIV XXV XXVI XXVII").split()}


@pytest.mark.parametrize("name", ["state.ecsv", "state.csv", "state.txt"])
def test_state_output_table(tmp_path, monkeypatch, capsys, name):
    from astropy.table import Table

    monkeypatch.chdir(tmp_path)
    assert main(["state", "-T", "5800", "-P", "1e5", "--elements", "Fe", "-o", name]) == 0
    fmt = {"state.ecsv": "ascii.ecsv", "state.csv": "ascii.csv", "state.txt": "ascii.fixed_width"}[name]
    kw = {"delimiter": " ", "bookend": False} if name.endswith(".txt") else {}
    t = Table.read(tmp_path / name, format=fmt, **kw)
    assert len(t) == 1 and "fraction_Fe_II" in t.colnames and "validity" in t.colnames
    assert main(["state", "-T", "5800", "-P", "1e5", "-o", name]) == 2
    err = capsys.readouterr().err
    assert "pass --overwrite" in err and "overwrite=True" not in err  # CLI wording, not Python's
    assert main(["state", "-T", "5800", "-P", "1e5", "-o", "s.h5"]) == 2


def test_cli_errors_use_cli_wording(capsys):
    # no physical solution: the API suggests errors='mask', which the CLI has no use for
    # atoms only: with molecules (H2) the joint solve finds a state here
    assert main(["state", "-T", "3000", "-e", "1e6", "--only", "H", "--no-molecules"]) == 2
    err = capsys.readouterr().err
    assert "errors=" not in err
