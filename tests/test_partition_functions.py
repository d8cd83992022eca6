"""Partition functions: the level-sum builder, the packaged table, the public API, and outside references.

References used here:
* Barklem & Collet 2016, A&A 588, A96, table 8 (version of Nov 2022, file
  reference/partition-functions/table8_vNov2022.dat in the shared folder);
* Irwin 1981, ApJS 45, 621, polynomial fits (reference/partition-functions/irwin1981-fits.dat);
* Inglis & Teller 1939, ApJ 90, 439 (hydrogen series cut-off).
"""

from __future__ import annotations

import re
from importlib import resources

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as hs

import ionbal.data as d
from ionbal.data import levels as lv
from ionbal.data.species import Species, to_roman

GRID = d.partition_grid()


def level_file(shared_dir, sp: Species):
    path = shared_dir / "data" / "levels" / f"{sp.element}_{to_roman(sp.charge + 1)}_nist.atom"
    if not path.exists():
        pytest.skip(f"level file {path.name} not found in the shared data")
    return path


# ----------------------------------------------------------------------------- the builder

def test_two_level_system_analytic():
    # U = g0 + g1 exp(-E1 hc / kT): common practice (Boltzmann factor)
    t = np.array([300.0, 3000.0, 30000.0])
    u = lv.partition_function_from_levels([0.0, 1000.0], [0, 1], t)
    np.testing.assert_allclose(u, 1.0 + 3.0 * np.exp(-1.438776877 * 1000.0 / t), rtol=1e-14)
    # same with statistical weights given directly
    u_g = lv.partition_function_from_levels([0.0, 1000.0], [1.0, 3.0], t, weights_are_g=True)
    np.testing.assert_allclose(u_g, u, rtol=1e-15)


def test_builder_ionization_limit_and_units():
    astropy_units = pytest.importorskip("astropy.units")
    e = [0.0, 1000.0, 50000.0]
    j = [0.5, 1.5, 0.5]
    # 50000 cm^-1 = 6.2 eV: excluded with a 5 eV limit, kept with a 7 eV limit
    full = lv.partition_function_from_levels(e, j, 1e5)
    cut = lv.partition_function_from_levels(e, j, 1e5, ionization_energy=5.0)
    assert cut == pytest.approx(2.0 + 4.0 * np.exp(-1.438776877e-2))
    assert full > cut
    assert lv.partition_function_from_levels(e, j, 1e5, ionization_energy=7.0) == pytest.approx(full)
    # Quantity inputs: energies in eV, temperature in K, limit in eV
    eq = (np.array(e) / lv.EV_TO_CM) * astropy_units.eV
    uq = lv.partition_function_from_levels(eq, j, 1e5 * astropy_units.K, ionization_energy=5.0 * astropy_units.eV)
    assert uq == pytest.approx(cut, rel=1e-12)
    # a scalar temperature gives a float, an array an array of the same shape
    assert isinstance(cut, float)
    assert lv.partition_function_from_levels(e, j, np.full((2, 3), 5000.0)).shape == (2, 3)


def test_builder_no_underflow_at_low_temperature():
    # ground level not at zero: the lowest level is factored out before exponentiating
    u = lv.partition_function_from_levels([5.0, 2000.0], [0, 0], 1.0)
    assert u == pytest.approx(np.exp(-1.438776877 * 5.0))


@pytest.mark.parametrize(
    "args, message",
    [
        (([0.0, 1.0], [0.5], 5000.0), "differ in length"),
        (([0.0], [-1.0], 5000.0), "J >= 0"),
        (([0.0], [0.5], -5.0), "bad value"),
        (([0.0], [0.5], [5000.0, np.nan]), r"index \(1,\)"),
        (([np.nan], [0.5], 5000.0), "finite"),
    ],
)
def test_builder_errors(args, message):
    with pytest.raises(ValueError, match=message):
        lv.partition_function_from_levels(*args)


def test_builder_all_levels_above_limit():
    with pytest.raises(ValueError, match="no level below"):
        lv.partition_function_from_levels([0.0], [0], 5000.0, ionization_energy=-1.0)


@given(
    hs.lists(hs.tuples(hs.floats(0.0, 1e5), hs.integers(0, 20)), min_size=1, max_size=30),
    hs.floats(100.0, 1e6),
)
@settings(deadline=None, max_examples=100)
def test_builder_bounds(levels_, t):
    # common practice: g_ground <= U <= sum of g, and U grows with T
    e = np.array([0.0] + [x[0] for x in levels_])
    j2 = np.array([1] + [x[1] for x in levels_])
    j = j2 / 2.0
    g = 2 * j + 1
    u = lv.partition_function_from_levels(e, j, t)
    assert g[e == 0].sum() * (1 - 1e-12) <= u <= g.sum() * (1 + 1e-12)
    assert lv.partition_function_from_levels(e, j, 1.5 * t) >= u * (1 - 1e-12)


# ----------------------------------------------------------------------------- the level-file reader

LEVEL_FILE = """\
7.5
   J              E
-----|----------------------|
     |                      |
   2 |              0.00    |
   8 |                      |
   3 |            446.45    |
     |                      |
 7/2,9/2 |        1000.0     |
 5/2 or 7/2 |     1100.0     |
 3/2?  |          [1200.5]   |
 1/2 |            (1300.25)  |
 10/2 |           1400.0(3)  |
   1 |            1500.0+x   |
   0. |           1600.0?a   |
 1.2 |            1700.0     |
     |            1800.0     |
 --- |            1900.0     |
   2 |            1950.0&dagger;  |
-----|----------------------|
     |                      |
 --- |        60490.0(20)   |
   1 |            70000     |
###
"""


def test_read_level_file_quirks(tmp_path):
    path = tmp_path / "X_I_nist.atom"
    path.write_text(LEVEL_FILE)
    ll = lv.read_level_file(path)
    assert ll.ionization_energy == 7.5
    table: dict[float, float] = {}
    for e, g in zip(ll.energy.tolist(), ll.g.tolist()):
        table[e] = table.get(e, 0.0) + g
    assert table[0.0] == 5  # J = 2
    assert table[446.45] == 7 + 17  # J = 3, plus the J = 8 level of the same term (estimated at the term's top)
    assert table[1000.0] == 8 + 10  # comma list: two levels, g summed
    assert table[1100.0] == 7  # "or": mean of 6 and 8
    assert table[1200.5] == 4  # "?" accepted, brackets removed
    assert table[1300.25] == 2  # parenthesised energy
    assert table[1400.0] == 11  # J = 10/2 = 5, uncertainty "(3)" stripped
    assert table[1500.0] == 3  # "+x" offset taken as 0
    assert table[1600.0] == 1  # "0." and "?a"
    assert table[1950.0] == 5  # "&dagger;"
    assert 1700.0 not in table  # J "1.2" is not a multiple of 1/2
    assert 1800.0 not in table and 1900.0 not in table  # no J
    assert 60490.0 not in table
    assert ll.energy[-1] == 70000.0  # above the limit, but listed: the reader does not cut
    below = ll.below(7.5 * lv.EV_TO_CM)
    assert below.energy.max() < 60490
    reasons = sorted(r for _, _, r in ll.skipped)
    assert reasons == ["J invalid", "J missing", "J missing", "J missing"]
    flags = dict(zip(ll.energy.tolist(), ll.energy_flags))
    assert "bracketed" in flags[1200.5] and "parenthesized" in flags[1300.25]
    assert "offset" in flags[1500.0] and "questionable" in flags[1600.0]
    assert "estimated" in [f for f in ll.energy_flags if "estimated" in f][0]


@pytest.mark.parametrize(
    "text, g, kind",
    [("7/2", 8, "single"), ("7/2,9/2", 18, "list"), ("1,2,3", 15, "list"), ("5/2 or 7/2", 7, "or"),
     ("5/2, 3/2 or 1/2", 4, "or"), ("3/2?", 4, "single+questionable"), ("---", None, "missing"),
     ("", None, "missing"), ("1.2", None, "invalid"), ("5/2,", 6, "single"), ("0.", 1, "single")],
)
def test_statistical_weight(text, g, kind):
    assert lv.statistical_weight(text) == (g, kind)


# ----------------------------------------------------------------------------- hydrogen

def test_inglis_teller_cut_off():
    # Inglis & Teller 1939, ApJ 90, 439: log10 n_e = 23.26 - 7.5 log10 n_max (from memory)
    assert lv.inglis_teller_n_max(1e14) == 17
    assert lv.H_N_MAX == 17
    assert lv.inglis_teller_n_max(10 ** (23.26 - 7.5)) == 10
    with pytest.raises(ValueError):
        lv.inglis_teller_n_max(0.0)


def test_hydrogen_partition_function():
    # common practice: U(H I) = 2 at photospheric temperatures; the n = 2 term adds 8 exp(-10.2 eV / kT)
    t = 10000.0
    chi = 13.598434599702
    n = np.arange(1, 18)
    direct = np.sum(2 * n**2 * np.exp(-chi * (1 - 1 / n**2) / (lv.K_B_EV * t)))
    assert lv.hydrogen_partition_function(t) == pytest.approx(direct, rel=1e-9)
    assert d.partition_function("H I", 5000.0) == pytest.approx(2.0, rel=1e-7)
    assert d.partition_function("H I", t) == pytest.approx(direct, rel=1e-5)
    assert d.partition_function_source("H I") == "hydrogenic"


# ----------------------------------------------------------------------------- the table

def test_grid_layout():
    assert GRID.log10_T.dtype == np.float64 and GRID.log10_T.size == 701
    assert GRID.log10_T_start == 2.5 and GRID.dlog10_T == 0.005
    assert GRID.log10_T[-1] == pytest.approx(6.0, abs=1e-12)
    np.testing.assert_allclose(GRID.log10_T, 2.5 + 0.005 * np.arange(701), atol=1e-12)
    assert GRID.lnU.dtype == np.float64 and GRID.lnU.flags.c_contiguous
    assert GRID.lnU.shape == (len(GRID.row), 701)
    expected = {(z, q) for z in range(1, 93) for q in range(0, min(2, z) + 1)}
    assert set(GRID.row) == expected
    for (z, q), r in GRID.row.items():
        assert GRID.species[r] == Species(z, q)
    assert np.all(np.isfinite(GRID.lnU))
    assert GRID.T_min == pytest.approx(316.227766) and GRID.T_max == pytest.approx(1e6)


def test_table_is_valid_ecsv_and_matches_the_fast_reader():
    table_mod = pytest.importorskip("astropy.table")
    text = resources.files("ionbal.tables").joinpath("partition_functions.ecsv").read_text()
    t = table_mod.Table.read(text, format="ascii.ecsv")
    assert t.colnames[0] == "log10_T" and len(t) == 701
    for (z, q), r in list(GRID.row.items())[::17]:
        name = f"{d.SYMBOLS[z - 1]}_{to_roman(q + 1)}"
        np.testing.assert_array_equal(np.asarray(t[name]), GRID.lnU[r])
    assert "ln U" in t.meta["quantity"]


def test_table_physical_properties():
    g0 = d.ground_weight_table()
    for (z, q), r in GRID.row.items():
        lnu = GRID.lnU[r]
        # common practice: U never below the ground-level weight ...
        assert lnu.min() >= np.log(g0[z, q]) - 1e-7, (z, q)
        # ... and U is non-decreasing in T (sum of Boltzmann factors); allow the 1e-7 rounding
        assert np.all(np.diff(lnu) >= -2e-7), (z, q)
    # bare nuclei
    assert np.all(GRID.lnU[GRID.row[(1, 1)]] == 0.0) and np.all(GRID.lnU[GRID.row[(2, 2)]] == 0.0)


def test_every_stage_i_to_iii_from_levels_or_documented():
    methods = {GRID.species[i]: m for i, m in enumerate(GRID.method)}
    assert methods[Species(1, 0)] == "hydrogenic"
    assert methods[Species(1, 1)] == "bare_nucleus" and methods[Species(2, 2)] == "bare_nucleus"
    other = {s: m for s, m in methods.items() if m not in ("levels", "hydrogenic", "bare_nucleus")}
    assert set(other.values()) <= {"ground_weight"}


def test_table_matches_direct_evaluation_and_interpolation_error(shared_dir):
    """Grid points reproduce the builder (tables are up to date); midpoints interpolate to < 0.1 %."""
    ie = d.ionization_energy_table()
    t_grid = 10.0 ** GRID.log10_T
    mid_log = 0.5 * (GRID.log10_T[1:] + GRID.log10_T[:-1])
    t_mid = 10.0**mid_log
    worst = (0.0, None, None)
    for sp, method in zip(GRID.species, GRID.method):
        if method != "levels":
            continue
        ll = lv.read_level_file(level_file(shared_dir, sp)).below(ie[sp.Z, sp.charge] * lv.EV_TO_CM)
        at_grid = lv.partition_function_from_levels(ll.energy, ll.g, t_grid, weights_are_g=True)
        np.testing.assert_allclose(d.partition_function(sp, t_grid), at_grid, rtol=3e-6, err_msg=sp.name)
        direct = lv.partition_function_from_levels(ll.energy, ll.g, t_mid, weights_are_g=True)
        err = np.abs(d.partition_function(sp, t_mid) / direct - 1.0)
        i = int(np.argmax(err))
        if err[i] > worst[0]:
            worst = (float(err[i]), sp.name, float(t_mid[i]))
    print(f"largest interpolation error at grid midpoints: {worst[0]:.2e} ({worst[1]} at {worst[2]:.0f} K)")
    assert worst[0] < 1e-3, worst
    # hydrogen as well
    h = lv.hydrogen_partition_function(t_mid)
    assert np.max(np.abs(d.partition_function("H I", t_mid) / h - 1)) < 1e-3


# ----------------------------------------------------------------------------- the public API

def test_partition_function_api_shapes_and_units():
    u = pytest.importorskip("astropy.units")
    assert isinstance(d.partition_function("Fe I", 5000.0), float)
    arr = d.partition_function("Fe I", np.full((2, 3), 5000.0))
    assert arr.shape == (2, 3) and np.all(arr == d.partition_function("Fe I", 5000.0))
    assert d.partition_function("Fe I", 5000.0 * u.K) == d.partition_function("Fe I", 5000.0)
    assert d.partition_function("Fe I", (4726.85 * u.deg_C)) == pytest.approx(d.partition_function("Fe I", 5000.0))
    # every accepted spelling gives the same
    assert d.partition_function((26, 0), 5000.0) == d.partition_function("fe", 5000.0)


def test_partition_function_higher_stages_and_special():
    g0 = d.ground_weight_table()
    assert d.partition_function("Fe IV", 8000.0) == g0[26, 3] == 6.0  # Fe IV ground 6S5/2 (NIST)
    assert d.partition_function("Fe XXVII", 8000.0) == 1.0  # bare nucleus
    assert d.partition_function("H-", 4000.0) == 1.0
    assert d.partition_function("H II", 4000.0) == 1.0
    assert d.partition_function_source("Fe IV") == "ground_weight"
    assert d.partition_function_source("H-") == "H-"
    assert d.partition_function_source("Fe II") == "levels"


@pytest.mark.parametrize(
    "t, message",
    [(100.0, "valid range 316.228 K to 1e\\+06 K"), (2e6, "outside"), (0.0, "bad value"),
     ([5000.0, np.inf], r"index \(1,\)"), ([[5000.0, -1.0]], r"index \(0, 1\)"), (np.nan, "finite")],
)
def test_partition_function_errors(t, message):
    with pytest.raises(ValueError, match=message):
        d.partition_function("Fe I", t)


def test_partition_function_at_grid_edges():
    assert d.partition_function("Fe I", 10**2.5) == pytest.approx(np.exp(GRID.lnU[GRID.row[(26, 0)], 0]))
    assert d.partition_function("Fe I", 1e6) == pytest.approx(np.exp(GRID.lnU[GRID.row[(26, 0)], -1]))


# ----------------------------------------------------------------------------- Barklem & Collet 2016

def _read_bc_table8(shared_dir):
    path = shared_dir / "reference" / "partition-functions" / "table8_vNov2022.dat"
    if not path.exists():
        pytest.skip(f"{path} not found")
    lines = path.read_text().splitlines()
    temps = np.array(lines[2].split()[2:], dtype=float)
    table = {}
    for line in lines[3:]:
        parts = line.split()
        if len(parts) == 1 + temps.size:
            table[parts[0]] = np.array(parts[1:], dtype=float)
    return temps, table


#: Species where we differ from Barklem & Collet (2016, table 8 vNov2022) by more than 1 % between
#: 1,000 and 10,000 K, and why.  Checked below: each reason reproduces the reference.
BC_AUTOIONIZING = {
    # B&C sum every listed level, also those above the first ionization limit (autoionizing levels of
    # configurations built on excited ion states).  We exclude levels at or above the limit.
    "Ca I": "325 levels above the limit; -2.7 % at 10,000 K",
    "Sr I": "138 levels above the limit; -3.1 % at 10,000 K",
    "Yb I": "36 levels above the limit; -1.1 % at 10,000 K",
}
BC_MISSING_ENERGIES = {
    # Levels listed with J but without energy (lanthanides, Ac): we place them at the highest known
    # energy of their term; B&C's placement is not documented and gives lower U.
    "Pr I": "19 levels without energy; +7.8 % at 4,000 K",
    "Pm II": "8 levels without energy; +6.4 % at 4,000 K",
    "Nd I": "29 levels without energy; +4.2 % at 6,000 K",
    "Sm I": "25 levels without energy; +2.3 % at 7,000 K",
    "Dy II": "12 levels without energy; +1.1 % at 9,000 K",
    "Ac I": "3 levels without energy; +1.1 % at 10,000 K",
}
BC_GROUND_LEVEL = {
    # The level list holds a single level, J = 3, where NIST (2024) gives the ground level 5D4 (as
    # Hund's rules give for 5d6); B&C use the list (U = 7), we use g0 = 9.
    "Os III": "+28.6 % at every temperature",
}


def test_against_barklem_collet_2016(shared_dir):
    temps, bc = _read_bc_table8(shared_dir)
    sel = (temps >= 1000.0) & (temps <= 10000.0)
    t = temps[sel]
    ie = d.ionization_energy_table()
    compared, worst, failures = 0, (0.0, "", 0.0), []
    exceptions = {**BC_AUTOIONIZING, **BC_MISSING_ENERGIES, **BC_GROUND_LEVEL}
    for sp in GRID.species:
        key = sp.name.replace(" ", "_")
        if key not in bc:
            continue
        ref = bc[key][sel]
        dev = d.partition_function(sp, t) / ref - 1.0
        i = int(np.argmax(np.abs(dev)))
        compared += 1
        if sp.name in exceptions:
            assert abs(dev[i]) > 0.01, f"{sp.name} is listed as an exception but agrees to 1 %: drop it"
            if sp.name in BC_GROUND_LEVEL:
                np.testing.assert_allclose(ref, 7.0, rtol=1e-5)
                assert d.partition_function(sp, t) == pytest.approx(np.full(t.size, 9.0))
                continue
            ll = lv.read_level_file(level_file(shared_dir, sp))
            est = np.array(["estimated" in f for f in ll.energy_flags])
            if sp.name in BC_AUTOIONIZING:
                # with the levels above the limit included, we reproduce B&C to 1 %
                u_all = lv.partition_function_from_levels(ll.energy, ll.g, t, weights_are_g=True)
                assert np.max(np.abs(u_all / ref - 1)) < 0.01, sp.name
                assert dev[i] < 0, sp.name  # we are below B&C where it matters
            else:
                # B&C lie between our U without the estimated levels and our U with them
                # (all listed levels, as B&C sum them)
                lo = lv.partition_function_from_levels(ll.energy[~est], ll.g[~est], t, weights_are_g=True)
                hi = lv.partition_function_from_levels(ll.energy, ll.g, t, weights_are_g=True)
                assert np.all(lo <= ref * 1.001) and np.all(ref <= hi * 1.001), sp.name
                assert abs(dev[i]) < 0.10, sp.name
            continue
        if abs(dev[i]) > abs(worst[0]):
            worst = (float(dev[i]), sp.name, float(t[i]))
        if abs(dev[i]) > 0.01:
            failures.append(f"{sp.name}: {dev[i]:+.4f} at {t[i]:.0f} K")
    print(f"B&C 2016 table 8: {compared} species compared; largest deviation outside the listed exceptions "
          f"{worst[0]:+.4f} ({worst[1]} at {worst[2]:.0f} K)")
    assert compared >= 270
    assert not failures, failures


def test_hydrogen_against_barklem_collet_2016(shared_dir):
    # our n <= 17 cut-off vs their NIST level list: the same to 0.03 % up to 10,000 K
    temps, bc = _read_bc_table8(shared_dir)
    sel = (temps >= 1000.0) & (temps <= 10000.0)
    np.testing.assert_allclose(d.partition_function("H I", temps[sel]), bc["H_I"][sel], rtol=3e-4)


# ----------------------------------------------------------------------------- Irwin 1981

def _read_irwin(shared_dir):
    path = shared_dir / "reference" / "partition-functions" / "irwin1981-fits.dat"
    if not path.exists():
        pytest.skip(f"{path} not found")
    fits = {}
    for line in path.read_text().splitlines():
        if line.startswith("#") or not line.strip():
            continue
        m = re.match(r"^\s*\d+\s+([\d.]+)\s+'[^']*'\s+[\d.]+\s+\d+\s+(.*)$", line)
        code = float(m.group(1))
        z = int(code)
        q = int(round((code - z) * 100))
        fits[(z, q)] = np.array([float(c.upper().replace("D", "E")) for c in m.group(2).split()])
    return fits


def _irwin_u(coeffs, t):
    ln_t = np.log(t)
    return np.exp(sum(c * ln_t**i for i, c in enumerate(coeffs)))


#: Species whose Irwin (1981) fit departs from our U by more than 10 % somewhere in 2,000-12,000 K,
#: all at the hot end (> 7,000 K), where U depends on the high-lying levels included.  The independent
#: modern NIST level sum of Barklem & Collet (2016) departs from Irwin by the same amount (checked
#: below), so the difference lies in the 1981 level data / fits, not in our sum.
IRWIN_HOT_END = ("Li I", "Na I", "K I", "Ca I", "Sc I", "Ti I", "V I", "Cr I", "Mn I", "Fe I", "Fe II",
                 "Co I", "Co II")


def test_against_irwin_1981(shared_dir, record_property):
    fits = _read_irwin(shared_dir)
    temps_bc, bc = _read_bc_table8(shared_dir)
    t = np.linspace(2000.0, 12000.0, 101)
    worst, worst_regular = (0.0, "", 0.0), (0.0, "", 0.0)
    n = 0
    for z in range(1, 31):
        for q in (0, 1):
            if q >= z or (z, q) not in fits:
                continue
            sp = Species(z, q)
            ref = _irwin_u(fits[(z, q)], t)
            dev = d.partition_function(sp, t) / ref - 1.0
            i = int(np.argmax(np.abs(dev)))
            n += 1
            if abs(dev[i]) > abs(worst[0]):
                worst = (float(dev[i]), sp.name, float(t[i]))
            if sp.name in IRWIN_HOT_END:
                assert abs(dev[i]) > 0.10, f"{sp.name} agrees with Irwin to 10 %: drop it from IRWIN_HOT_END"
                cool = t <= 6500.0
                assert np.max(np.abs(dev[cool])) < 0.10, sp.name
                s = (temps_bc >= 2000.0) & (temps_bc <= 10000.0)
                ref_bc = _irwin_u(fits[(z, q)], temps_bc[s])
                ours = d.partition_function(sp, temps_bc[s])
                bc_u = bc[sp.name.replace(" ", "_")][s]
                assert np.max(np.abs(ours - bc_u) / ref_bc) < 0.03, sp.name
                continue
            if abs(dev[i]) > abs(worst_regular[0]):
                worst_regular = (float(dev[i]), sp.name, float(t[i]))
            assert abs(dev[i]) < 0.10, f"{sp.name}: {dev[i]:+.3f} at {t[i]:.0f} K"
    message = (f"Irwin 1981 ({n} species, 2,000-12,000 K): largest deviation {worst[0]:+.3f} ({worst[1]} at "
               f"{worst[2]:.0f} K); outside the hot-end list {worst_regular[0]:+.3f} ({worst_regular[1]} at "
               f"{worst_regular[2]:.0f} K)")
    print(message)
    record_property("irwin_1981_largest_deviation", message)
    assert n == 59
