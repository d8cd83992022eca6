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
