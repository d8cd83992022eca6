"""Pictures (ionbal.plot, ionbal plot): every figure rendered to a file, checked for content and labels.

The numbers drawn are checked against the API they come from; the electron budget against a
budget computed here by hand from the stage fractions (charge conservation, common practice).
Skipped without matplotlib (the ``plot`` extra).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
import pytest

mpl = pytest.importorskip("matplotlib")

import ionbal  # noqa: E402
from ionbal import plot  # noqa: E402
from ionbal.column import read_model, solve_column  # noqa: E402
from ionbal.grid import Axis, GridSpec, run_grid  # noqa: E402
from ionbal.plot_cli import add_plot_command, main, run_plot  # noqa: E402

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), file signature


def assert_png(path: Path) -> None:
    """A non-empty PNG that is not one flat colour."""
    data = path.read_bytes()
    assert data[:8] == PNG_SIGNATURE, path
    assert len(data) > 5000, len(data)
    img = mpl.image.imread(path)
    assert img.ndim == 3 and img.shape[0] > 200 and img.shape[1] > 200
    assert float(np.std(img[..., :3])) > 0.05  # something is drawn


def data_lines(ax):
    return [ln for ln in ax.get_lines() if len(ln.get_xdata()) > 1 and not ln.get_label().startswith("_")]


@pytest.fixture(scope="module")
def grid_path(tmp_path_factory):
    """A small grid reaching the dense corner, where validity flags are raised: 9 x 11 points."""
    spec = GridSpec(Axis.log("temperature", 3000.0, 30000.0, 9), Axis.log("gas_pressure", 1e2, 1e12, 11),
                    species=("H I", "H II", "Fe I", "Fe II"), tile_size=200)
    path = tmp_path_factory.mktemp("plotgrid") / "grid.h5"
    run_grid(spec, path, progress=False)
    return path


@pytest.fixture(scope="module")
def vessa7():
    """The invented giant Vessa-7 of examples/ (not a real star), with its invented 'published' P_e."""
    mix = ionbal.Mixture.solar("AGSS09").scaled(metallicity=-1.5, alpha=0.4)
    return solve_column(read_model(EXAMPLES / "vessa7-model.txt"), mixture=mix)


@pytest.fixture(autouse=True)
def no_global_figures():
    """No figure may stay registered with pyplot, and the rc settings must not leak."""
    from matplotlib import _pylab_helpers

    before = dict(mpl.rcParams)
    n = _pylab_helpers.Gcf.get_num_fig_managers()
    yield
    assert _pylab_helpers.Gcf.get_num_fig_managers() == n
    assert dict(mpl.rcParams) == before


# ---------------------------------------------------------------------------------------------------
# stage fractions at a fixed state
# ---------------------------------------------------------------------------------------------------

def test_fractions_png(tmp_path):
    out = tmp_path / "fe.png"
    fig = plot.plot_fractions(["Fe", "Ca"], (3000.0, 20000.0), n_points=40, gas_pressure=1e5, path=out)
    assert_png(out)
    assert len(fig.axes) == 2
    r = ionbal.solve(np.geomspace(3000.0, 20000.0, 40), gas_pressure=1e5)
    for ax, el in zip(fig.axes, ("Fe", "Ca")):
        assert ax.get_ylabel() == f"{el}: fraction"
        lines = data_lines(ax)
        expected = [(s, f) for s, f in zip(r.stages(el), r.fractions(el)) if f.max() >= 1e-3]
        assert [ln.get_label() for ln in lines] == [s for s, _ in expected]
        for ln, (_, f) in zip(lines, expected):
            np.testing.assert_allclose(ln.get_ydata(), f, rtol=1e-12)
        assert len(ax.get_legend().get_texts()) == len(expected)
    assert fig.axes[-1].get_xlabel() == "Temperature $T$ [K]"
    assert fig.axes[-1].get_xscale() == "log"
    title = fig.get_suptitle()
    assert "AGSS09" in title and "P_\\mathrm{gas}" in title and "10^{5}" in title


def test_fractions_log_axis_and_other_state(tmp_path):
    out = tmp_path / "h.png"
    mix = ionbal.Mixture.solar("AGSS09").scaled(metallicity=-1.0)
    fig = plot.plot_fractions("H", (4000.0, 12000.0), n_points=30, electron_pressure=10.0, mixture=mix, log=True,
                              min_fraction=1e-8, path=out)
    assert_png(out)
    (ax,) = fig.axes
    assert ax.get_yscale() == "log"
    assert [ln.get_label() for ln in data_lines(ax)] == ["H$^-$", "H I", "H II"]
    assert "[M/H]=-1.00" in fig.get_suptitle() and "P_e" in fig.get_suptitle()


def test_fractions_quantity_and_returned_figure(tmp_path):
    import astropy.units as u

    fig = plot.plot_fractions("Ca", (4000.0, 8000.0), n_points=20, gas_pressure=1e4 * u.Pa)  # = 1e5 dyn cm^-2
    assert "10^{5}" in fig.get_suptitle()
    out = tmp_path / "mine.png"
    fig.savefig(out)  # the figure carries its own (Agg) canvas: no pyplot needed
    assert_png(out)


@pytest.mark.parametrize("ext, head", [(".pdf", b"%PDF-"), (".svg", b"<?xml")])
def test_other_formats(tmp_path, ext, head):
    out = tmp_path / f"fe{ext}"
    plot.plot_fractions("Fe", (3000.0, 9000.0), n_points=20, path=out)
    data = out.read_bytes()
    assert data.startswith(head) and len(data) > 5000
    if ext == ".svg":
        assert b"<svg" in data


def test_file_rules(tmp_path):
    out = tmp_path / "fe.png"
    with pytest.raises(ValueError, match=r"unknown extension \.jpg; use \.png, \.pdf or \.svg"):
        plot.plot_fractions("Fe", (3000.0, 9000.0), n_points=10, path=tmp_path / "fe.jpg")
    with pytest.raises(ValueError, match="unknown extension"):
        plot.save_figure(plot.plot_fractions("Fe", (3000.0, 9000.0), n_points=10), tmp_path / "fe")
    out.write_bytes(b"precious")
    with pytest.raises(FileExistsError, match="already exists"):
        plot.plot_fractions("Fe", (3000.0, 9000.0), n_points=10, path=out)
    assert out.read_bytes() == b"precious"
    plot.plot_fractions("Fe", (3000.0, 9000.0), n_points=10, path=out, overwrite=True)
    assert_png(out)
    with pytest.raises(FileNotFoundError, match="does not exist"):
        plot.plot_fractions("Fe", (3000.0, 9000.0), n_points=10, path=tmp_path / "no" / "fe.png")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fe.png"]  # no temporary file left


@pytest.mark.parametrize("kwargs, match", [
    (dict(elements="Xx"), "not an element symbol"),
    (dict(elements=[]), "no element to plot"),
    (dict(elements="Fe", temperature=(5000.0, 3000.0)), "increasing positive"),
    (dict(elements="Fe", gas_pressure=1e5, mass_density=1e-7), "one fixed state variable"),
    (dict(elements="Fe", gas_pressure=-1.0), "finite positive"),
    (dict(elements="Fe", gas_pressure=[1.0, 2.0]), "one number"),
    (dict(elements="Fe", min_fraction=2.0), "min_fraction"),
    (dict(elements="Fe", mixture=ionbal.Mixture({"H": 12.0, "He": 10.9})), "not in the mixture"),
])
def test_fractions_bad_input(kwargs, match):
    with pytest.raises(ValueError, match=match):
        plot.plot_fractions(**kwargs)


def test_missing_matplotlib_message(monkeypatch):
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    with pytest.raises(ImportError, match=r"plotting needs matplotlib: pip install 'ionbal\[plot\]'"):
        plot.plot_fractions("Fe", (3000.0, 9000.0), n_points=10)


# ---------------------------------------------------------------------------------------------------
# grid maps
# ---------------------------------------------------------------------------------------------------

def test_grid_map_with_validity(grid_path, tmp_path):
    from ionbal.validity import FLAG_BITS, PHYSICS_FLAGS

    out = tmp_path / "map.png"
    fig = plot.plot_grid_map(grid_path, path=out)
    assert_png(out)
    maps = [ax for ax in fig.axes if ax.get_label() != "<colorbar>"]
    assert len(maps) == 2
    assert maps[0].get_ylabel() == r"Gas pressure $P_\mathrm{gas}$ [dyn cm$^{-2}$]"
    assert all(ax.get_xscale() == "log" and ax.get_yscale() == "log" for ax in maps)
    labels = [ax.get_label() for ax in fig.axes]
    assert sum(lb == "<colorbar>" for lb in labels) == 2
    bars = [ax for ax in fig.axes if ax.get_label() == "<colorbar>"]
    assert "Electron density" in bars[0].get_xlabel() and "Mean molecular weight" in bars[1].get_xlabel()
    with ionbal.open_grid(grid_path) as g:
        mask = np.asarray(g["validity"]).astype(int)
        ne = np.asarray(g["electron_density"])
    present = [n for n in PHYSICS_FLAGS if ((mask & FLAG_BITS[n]) != 0).any()]
    assert present, "the test grid should reach flagged states"
    legend = maps[-1].get_legend()
    texts = [t.get_text() for t in legend.get_texts()]
    assert len(texts) == len(present)
    for name, text in zip(present, texts):
        assert text.endswith(f"({int(((mask & FLAG_BITS[name]) != 0).sum())})")
    # the colours are n_e itself (rows: pressure, columns: temperature)
    mesh = maps[0].collections[0]
    np.testing.assert_allclose(np.asarray(mesh.get_array()).reshape(ne.T.shape), ne.T, rtol=1e-12)


def test_grid_map_species_and_no_validity(grid_path, tmp_path):
    out = tmp_path / "fe2.png"
    with ionbal.open_grid(grid_path) as g:
        fig = plot.plot_grid_map(g, "Fe II", show_validity=False, path=out)
        assert g.fraction("Fe II").shape == g.shape  # the open file stays usable
    assert_png(out)
    (ax,) = [a for a in fig.axes if a.get_label() != "<colorbar>"]
    assert ax.get_legend() is None
    assert "Fe II" in [a for a in fig.axes if a.get_label() == "<colorbar>"][0].get_xlabel()


def test_grid_map_bad_input(grid_path, tmp_path):
    with pytest.raises(ValueError, match="neither a quantity nor a species"):
        plot.plot_grid_map(grid_path, "bogus")
    with pytest.raises(ValueError, match="no .M/H. or .alpha/M. axis"):
        plot.plot_grid_map(grid_path, metallicity=-1.0)
    with pytest.raises(FileNotFoundError):
        plot.plot_grid_map(tmp_path / "none.h5")


def test_grid_map_composition(tmp_path):
    spec = GridSpec(Axis.log("temperature", 4000.0, 8000.0, 4), Axis.log("gas_pressure", 1e2, 1e5, 3),
                    metallicity=(-1.0, 0.0), alpha=(0.0, 0.4), species=("Fe I", "Fe II"))
    path = run_grid(spec, tmp_path / "comp.h5", progress=False).path
    fig = plot.plot_grid_map(path, "electron_density", metallicity=-1.0, alpha=0.4, path=tmp_path / "c.png")
    assert "[M/H] = -1.00" in fig.get_suptitle() and "= +0.40" in fig.get_suptitle()
    with ionbal.open_grid(path) as g:
        ne = np.asarray(g["electron_density"])[0, 1]
    mesh = [a for a in fig.axes if a.get_label() != "<colorbar>"][0].collections[0]
    np.testing.assert_allclose(np.asarray(mesh.get_array()).reshape(ne.T.shape), ne.T, rtol=1e-12)
    with pytest.raises(ValueError, match="metallicity -0.5 is not on the grid"):
        plot.plot_grid_map(path, metallicity=-0.5)


# ---------------------------------------------------------------------------------------------------
# columns
# ---------------------------------------------------------------------------------------------------

def test_column_comparison(vessa7, tmp_path):
    out = tmp_path / "cmp.png"
    fig = plot.plot_column_comparison(vessa7, path=out)
    assert_png(out)
    top, bottom = fig.axes
    c = vessa7.comparisons[0]
    assert c.quantity == "electron_pressure"
    assert [ln.get_label() for ln in data_lines(top)] == ["ionbal $P_e$", "model $P_e$"]
    assert top.get_yscale() == "log" and "Electron pressure" in top.get_ylabel()
    assert bottom.get_xlabel() == r"$\log_{10}\,\tau$"  # the model's log_tau column, found by "auto"
    np.testing.assert_allclose(data_lines(bottom)[0].get_ydata(), c.percent, rtol=1e-12)
    np.testing.assert_allclose(data_lines(top)[0].get_xdata(), np.asarray(vessa7.table["log_tau"]))
    assert "%" in bottom.get_ylabel()
    assert f"worst {c.worst_percent[0]:+.2g} %" in fig.get_suptitle()
    fig = plot.plot_column_comparison(vessa7, unit="dex", x="index")
    np.testing.assert_allclose(data_lines(fig.axes[1])[0].get_ydata(), c.dex, rtol=1e-12)
    assert fig.axes[1].get_xlabel() == "Depth point"


def test_column_without_comparison(tmp_path):
    model = tmp_path / "m.txt"
    model.write_text("# invented test structure\ntemperature gas_pressure\n4000 1e3\n5000 1e4\n6000 1e5\n")
    r = solve_column(read_model(model))
    with pytest.raises(ValueError, match="no comparison"):
        plot.plot_column_comparison(r)
    fig = plot.plot_column_fractions(r, "Fe", x="temperature", path=tmp_path / "f.png")
    assert fig.axes[0].get_xlabel() == "Temperature $T$ [K]"


def test_column_fractions(vessa7, tmp_path):
    out = tmp_path / "col.png"
    fig = plot.plot_column_fractions(vessa7, ["Fe", "H"], log=True, min_fraction=1e-9, path=out)
    assert_png(out)
    fe, h = fig.axes
    assert [ln.get_label() for ln in data_lines(fe)] == ["Fe I", "Fe II", "Fe III"]
    assert [ln.get_label() for ln in data_lines(h)] == ["H$^-$", "H I", "H II"]
    k = vessa7.species.index("Fe II")
    np.testing.assert_allclose(data_lines(fe)[1].get_ydata(), vessa7.fractions[k], rtol=1e-12)
    with pytest.raises(ValueError, match="no column 'nope'"):
        plot.plot_column_fractions(vessa7, "Fe", x="nope")
    with pytest.raises(ValueError, match="expected a column result"):
        plot.plot_column_fractions(object(), "Fe")


# ---------------------------------------------------------------------------------------------------
# electron budget
# ---------------------------------------------------------------------------------------------------

def budget_by_hand(r):
    """share_X = w_X <q>_X / sum_Y w_Y <q>_Y, <q>_X from the stage fractions (H- has charge -1)."""
    mix = r.mixture
    contrib = {}
    for el, w in zip(mix.elements, mix.number_fractions):
        stages = r.stages(el)
        charges = [-1 if s == "H-" else i - (1 if stages[0] == "H-" else 0) for i, s in enumerate(stages)]
        q = np.tensordot(np.asarray(charges, dtype=float), r.fractions(el), axes=1)
        contrib[el] = w * q
    if r.molecules:  # charge conservation counts the molecular ions too (H2+ +1, H2- -1, ...)
        from ionbal.data.molecules import parse_molecule

        contrib["molecular ions"] = sum(parse_molecule(m).charge * r.molecule_densities([m])[0]
                                        for m in r.molecules if parse_molecule(m).charge) / r.nuclei_density
    total = sum(contrib.values())
    return {el: c / total for el, c in contrib.items()}, total


def test_electron_budget_by_hand(tmp_path):
    T = np.geomspace(3000.0, 20000.0, 60)
    r = ionbal.solve(T, gas_pressure=1e4)
    shares, total = budget_by_hand(r)
    # charge conservation: the electrons given per nucleus times the nuclei density is n_e
    np.testing.assert_allclose(total * r.nuclei_density, r.electron_density, rtol=1e-8)
    np.testing.assert_allclose(sum(shares.values()), 1.0, rtol=1e-12)
    api = plot.electron_shares(r)
    for el in shares:
        np.testing.assert_allclose(api[el], shares[el], rtol=1e-9, atol=1e-15)
    out = tmp_path / "budget.png"
    fig = plot.plot_electron_budget(shares, T, max_elements=5, path=out)
    assert_png(out)
    (ax,) = fig.axes
    assert len(ax.collections) == 6  # five donors and "others"
    texts = [t.get_text() for t in ax.get_legend().get_texts()]
    assert texts[0].endswith("others") and len(texts) == 6
    top = sorted(shares, key=lambda e: -shares[e].max())[:5]
    assert [t.split()[0] for t in texts[1:]] == top[::-1]
    assert ax.get_xlabel() == "Temperature $T$ [K]" and "free electrons" in ax.get_ylabel()
    assert ax.get_xscale() == "log"


def test_electron_budget_bad_input():
    x = np.linspace(0.0, 1.0, 5)
    with pytest.raises(ValueError, match="non-empty mapping"):
        plot.plot_electron_budget({}, x)
    with pytest.raises(ValueError, match="has 4 values but x has 5"):
        plot.plot_electron_budget({"H": np.ones(4)}, x)
    with pytest.raises(ValueError, match="must be finite"):
        plot.plot_electron_budget({"H": [1.0, np.nan, 1.0, 1.0, 1.0]}, x)
    fig = plot.plot_electron_budget({"H": np.full(5, 0.7), "Na": np.full(5, 0.3)}, x, xlabel="Depth point")
    assert fig.axes[0].get_xscale() == "linear"


# ---------------------------------------------------------------------------------------------------
# command line
# ---------------------------------------------------------------------------------------------------

def test_cli_fractions(tmp_path, capsys):
    out = tmp_path / "fe.png"
    assert main(["fractions", "Fe", "Ca", "-P", "1e5", "-T", "3000:20000:40", "-o", str(out)]) == 0
    assert_png(out)
    assert "wrote" in capsys.readouterr().out
    assert main(["fractions", "Fe", "-o", str(out)]) == 2
    assert "already exists" in capsys.readouterr().err
    assert main(["fractions", "Fe", "-T", "3000:9000:20", "-o", str(tmp_path / "fe.gif")]) == 2
    assert "unknown extension" in capsys.readouterr().err


def test_cli_wiring_into_a_parser(grid_path, tmp_path):
    # what cli.py will do: add the command to its sub-parsers and call args.func
    parser = argparse.ArgumentParser(prog="ionbal")
    add_plot_command(parser.add_subparsers(dest="command"))
    out = tmp_path / "map.svg"
    args = parser.parse_args(["plot", "map", str(grid_path), "-q", "electron_density", "-o", str(out)])
    assert args.func is run_plot and args.func(args) == 0
    assert b"<svg" in out.read_bytes()


def test_cli_column_and_budget(tmp_path):
    model = str(EXAMPLES / "vessa7-model.txt")
    a = tmp_path / "cmp.png"
    assert main(["column", model, "--metallicity", "-1.5", "--alpha", "0.4", "-o", str(a)]) == 0
    assert_png(a)
    b = tmp_path / "colfe.png"
    assert main(["column", model, "--elements", "Fe,Ti", "--log", "-x", "temperature", "-o", str(b)]) == 0
    assert_png(b)
    c = tmp_path / "budget.pdf"
    assert main(["budget", "-P", "1e3", "-T", "3000:15000:30", "-o", str(c)]) == 0
    assert c.read_bytes().startswith(b"%PDF-")
