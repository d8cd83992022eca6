"""Every Python example of README.md runs, and the cheap command lines it shows do too."""

from __future__ import annotations

import re
import shlex
from pathlib import Path

import pytest

README = Path(__file__).resolve().parents[1] / "README.md"
TEXT = README.read_text(encoding="utf-8")
PYTHON_BLOCKS = re.findall(r"```python\n(.*?)```", TEXT, flags=re.S)


def test_readme_has_python_examples():
    assert len(PYTHON_BLOCKS) >= 2


@pytest.fixture
def giant_grid(tmp_path, monkeypatch):
    """The README's giant.h5, on a coarse grid of the same ranges (the README builds it with 181 x 141)."""
    from ionbal.cli import main

    monkeypatch.chdir(tmp_path)
    assert main(["grid", "-T", "3000:12000:10", "-P", "1e-1:1e6:8", "--metallicity", "-1.5", "--alpha", "0.4",
                 "-o", "giant.h5", "-q"]) == 0
    return tmp_path / "giant.h5"


@pytest.mark.parametrize("k", range(len(PYTHON_BLOCKS)))
def test_readme_python_block_runs(k, giant_grid):
    namespace: dict = {}
    for code in PYTHON_BLOCKS[:k + 1]:  # later blocks use the imports of the first
        exec(compile(code, f"README.md python block {k}", "exec"), namespace)


def test_readme_claims_hold():
    import astropy.units as u
    import numpy as np

    import ionbal

    T = np.geomspace(3000, 30000, 50)[:, None]
    r = ionbal.solve(T, gas_pressure=np.geomspace(1e-2, 1e6, 40) * u.dyn / u.cm**2)
    assert r.shape == (50, 40) and r.electron_density.unit == u.cm**-3
    assert r.fractions("Ca").shape == (21, 50, 40)


# the command lines in the README's prose that run in a second or two (not the full default grid)
COMMANDS = [
    "ionbal state -T 5800 -P 1e5",
    "ionbal state -T 20000 -P 1e12",
    "ionbal state -T 5800 -P 1e5 --json",
    "ionbal state -T 5800 -P 1e5 --thermo",
    "ionbal state -T 5800 -P 1e5 -o state.ecsv",
    "ionbal column examples/vessa7-model.txt --metallicity -1.5 --alpha 0.4 -o vessa7.ecsv",
    "ionbal column examples/vessa7-model.txt -o out.ecsv -o out.csv",
]


@pytest.mark.parametrize("command", COMMANDS)
def test_readme_command_runs(command, tmp_path, monkeypatch, capsys):
    from ionbal.cli import main

    text = TEXT.replace("\n", " ")
    assert command in text or command.replace(" examples/vessa7-model.txt", " MODEL") in text
    root = README.parent
    argv = [str(root / a) if a.startswith("examples/") else a for a in shlex.split(command)[1:]]
    monkeypatch.chdir(tmp_path)
    assert main(argv) == 0, capsys.readouterr().err


def test_readme_column_example_output():
    # the README quotes the summary of the Vessa-7 comparison; it must be what the code prints
    import ionbal
    from ionbal.column import read_model, solve_column

    mix = ionbal.Mixture.solar("AGSS09").scaled(metallicity=-1.5, alpha=0.4)
    (c,) = solve_column(read_model(README.parent / "examples" / "vessa7-model.txt"), mixture=mix).comparisons
    quoted = re.search(r"#   (electron_pressure: ionbal vs input.*?)\n#   (worst.*?)\n", TEXT)
    assert quoted is not None
    assert c.summary() == quoted.group(1) + " " + quoted.group(2)
