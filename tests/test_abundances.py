"""Atomic masses, solar abundance sets and the Mixture API."""

from __future__ import annotations

import math
import pickle
from importlib import resources

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as hs

from ionbal.data import SOLAR_MIXTURES, Mixture, atomic_mass
from ionbal.data.elements import SYMBOLS, atomic_masses
from ionbal.data.mixture import ABUNDANCE_RANGE, ALPHA_ELEMENTS, ATOMIC_MASS_UNIT_G

# ----------------------------------------------------------------------------- atomic masses

#: No standard atomic weight: mass number of the longest-lived isotope.  periodictable lists Tc as 98;
#: we follow the IUPAC periodic table, Tc-97 (half-life 4.21 Myr against 4.2 Myr for Tc-98, from memory).
NO_STANDARD_WEIGHT = {"Tc": 97, "Pm": 145, "Po": 209, "At": 210, "Rn": 222, "Fr": 223, "Ra": 226, "Ac": 227}


def test_masses_against_periodictable():
    # independent source: the periodictable package (PyPI); 0.01 u or 1e-4 relative
    periodictable = pytest.importorskip("periodictable")
    for el in periodictable.elements:
        if not 1 <= el.number <= 92:
            continue
        ours = atomic_mass(el.number)
        if el.symbol in NO_STANDARD_WEIGHT:
            assert ours == NO_STANDARD_WEIGHT[el.symbol]
            assert abs(ours - el.mass) <= 1.0, el.symbol
            continue
        assert abs(ours - el.mass) <= max(0.01, 1e-4 * el.mass), (el.symbol, ours, el.mass)


def test_mass_spot_values():
    # IUPAC 2021 abridged standard atomic weights (Prohaska et al. 2022, Pure Appl. Chem. 94, 573)
    assert atomic_mass("H") == 1.008
    assert atomic_mass("He") == 4.0026
    assert atomic_mass("Fe") == 55.845
    assert atomic_mass(92) == 238.03
    m = atomic_masses()
    assert m.shape == (93,) and math.isnan(m[0]) and not m.flags.writeable
    assert np.all(np.diff(m[1:]) > -2.0)  # nearly increasing with Z (Ar/K, Co/Ni, Te/I, Th/Pa inversions)


# ----------------------------------------------------------------------------- the abundance table

def _table():
    astropy_table = pytest.importorskip("astropy.table")
    text = resources.files("ionbal.tables").joinpath("abundances.ecsv").read_text()
    return astropy_table.Table.read(text, format="ascii.ecsv")


def test_table_columns():
    t = _table()
    assert list(t["Z"]) == list(range(1, 93))
    assert list(t["element"]) == list(SYMBOLS)
    for key in SOLAR_MIXTURES:
        assert key in t.colnames
        col = t[key]
        assert col[0] == 12.0  # H = 12 defines the scale
        # no value for elements without stable isotopes and no solar measurement
        for el in ("Tc", "Pm", "Po", "At", "Rn", "Fr", "Ra", "Ac", "Pa"):
            assert np.ma.is_masked(col[SYMBOLS.index(el)]), (key, el)


# Spot values A(X), each with its source.  "from memory" marks values typed from memory of the paper.
SPOT_VALUES = {
    # Asplund et al. 2009, ARA&A 47, 481, Table 1 (photospheric; from memory)
    "AGSS09": {"He": 10.93, "C": 8.43, "N": 7.83, "O": 8.69, "Ne": 7.93, "Mg": 7.60, "Si": 7.51, "Fe": 7.50},
    # Asplund, Amarsi & Grevesse 2021, A&A 653, A141, Table 2 (from memory)
    "AAG21": {"He": 10.914, "C": 8.46, "N": 7.83, "O": 8.69, "Fe": 7.46, "Si": 7.51},
    # Grevesse & Sauval 1998, Space Sci. Rev. 85, 161, Table 1 (from memory)
    "GS98": {"He": 10.93, "C": 8.52, "N": 7.92, "O": 8.83, "Ne": 8.08, "Si": 7.55, "Fe": 7.50},
    # Anders & Grevesse 1989, GeCoA 53, 197, Table 2 photospheric (from memory); Ta meteoritic -0.13
    # (CI 0.0207 atoms per 1e6 Si, from memory; the shared transcription has lost the sign)
    "AG89": {"He": 10.99, "C": 8.56, "N": 8.05, "O": 8.93, "Ne": 8.09, "Si": 7.55, "Fe": 7.67, "Ta": -0.13},
    # Lodders, Palme & Gail 2009, Landolt-Boernstein VI/4B (from memory; less certain than the others)
    "LPG09": {"He": 10.93, "C": 8.39, "N": 7.86, "O": 8.73, "Fe": 7.46},
}


@pytest.mark.parametrize("key", list(SPOT_VALUES))
def test_spot_values(key):
    mix = Mixture.solar(key)
    for el, value in SPOT_VALUES[key].items():
        assert mix[el] == pytest.approx(value, abs=1e-9), (key, el)


def test_meteoritic_where_no_photospheric_value():
    # Asplund et al. 2009 Table 1 has no photospheric As, Se, Br, Cd, Sb, Te, I, Cs, Ta, Re, Pt, Hg, Bi, U;
    # the meteoritic values are used (common practice in the paper's recommended mixture)
    t = _table()
    origin = dict(zip(t["element"], t["AGSS09_origin"]))
    for el in ("As", "Se", "Br", "Cd", "Sb", "Te", "I", "Cs", "Ta", "Re", "Pt", "Hg", "Bi", "U"):
        assert origin[el] == "meteorites", el
    for el in ("H", "He", "C", "O", "Fe", "Ne", "Ar", "Kr", "Xe", "Th"):
        assert origin[el] == "photosphere", el
    agss09 = Mixture.solar("AGSS09")
    assert agss09["U"] == -0.54 and agss09["Ta"] == -0.12  # CI values of Table 1 (from memory)


def test_agss09_mass_fractions():
    # Asplund et al. 2009, ARA&A 47, 481, Sect. 3.12 / Table 4: present-day photosphere
    # X = 0.7381, Y = 0.2485, Z = 0.0134, Z/X = 0.0181
    x, y, z = Mixture.solar("AGSS09").mass_fractions()
    assert x == pytest.approx(0.7381, abs=0.002)
    assert y == pytest.approx(0.2485, abs=0.002)
    assert z == pytest.approx(0.0134, abs=0.002)
    assert z / x == pytest.approx(0.0181, abs=0.0005)
    assert x + y + z == pytest.approx(1.0, abs=1e-14)


def test_other_mass_fractions():
    # Asplund, Amarsi & Grevesse 2021, Table 4 present-day photosphere: X = 0.7438, Y = 0.2423,
    # Z = 0.0139 (from memory)
    x, y, z = Mixture.solar("AAG21").mass_fractions()
    assert (x, y, z) == pytest.approx((0.7438, 0.2423, 0.0139), abs=0.002)
    # Grevesse & Sauval 1998: Z/X = 0.0231 (from memory)
    x, y, z = Mixture.solar("GS98").mass_fractions()
    assert z / x == pytest.approx(0.0231, abs=0.0005)


# ----------------------------------------------------------------------------- Mixture API

def test_solar_keys():
    assert SOLAR_MIXTURES == ("AG89", "GS98", "AGSS09", "AAG21", "LPG09")
    for key in SOLAR_MIXTURES:
        m = Mixture.solar(key)
        assert m.name == key and m["H"] == 12.0 and len(m) > 80
    assert Mixture.solar() == Mixture.solar("AGSS09")
    with pytest.raises(ValueError, match="valid keys are AG89, GS98, AGSS09, AAG21, LPG09"):
        Mixture.solar("AGS05")


def test_construction_and_attributes():
    m = Mixture({"Fe": 7.5, 1: 12.0, "he": 10.93})
    assert m.name == "custom"
    assert m.elements == ("H", "He", "Fe")
    assert m.atomic_numbers.dtype == np.int64 and list(m.atomic_numbers) == [1, 2, 26]
    np.testing.assert_array_equal(m.log_eps, [12.0, 10.93, 7.5])
    nf = m.number_fractions
    assert nf.sum() == pytest.approx(1.0)
    assert nf[2] / nf[0] == pytest.approx(10 ** (7.5 - 12.0))
    assert m["Fe"] == 7.5 and m[26] == 7.5 and "Fe" in m and "O" not in m and "Xx" not in m
    assert list(m) == ["H", "He", "Fe"] and dict(m) == {"H": 12.0, "He": 10.93, "Fe": 7.5}
    with pytest.raises(KeyError, match="O is not in mixture"):
        m["O"]
    with pytest.raises(ValueError, match="unknown element"):
        m["Xx"]


def test_hydrogen_free_and_pure_hydrogen():
    m = Mixture({"He": 11.0, "C": 9.5})
    x, y, z = m.mass_fractions()
    assert x == 0.0 and y > 0.0 and z > 0.0
    assert m.number_fractions.sum() == pytest.approx(1.0)
    h = Mixture({"H": 12.0})
    assert h.mass_fractions() == (1.0, 0.0, 0.0)
    assert h.mean_atomic_mass == pytest.approx(1.008)
    assert h.mean_mass_per_nucleus == pytest.approx(1.008 * ATOMIC_MASS_UNIT_G)


@pytest.mark.parametrize(
    "data, message",
    [
        ({}, "at least one element"),
        ({"Fe": float("nan")}, "abundance of Fe is not finite"),
        ({"Fe": float("inf")}, "abundance of Fe is not finite"),
        ({"Fe": 3.2e7}, "abundance of Fe A\\(X\\) = 3.2e\\+07 is outside"),
        ({"Fe": -20.0}, "outside the accepted range \\[-15, 15\\]"),
        ({"Xx": 7.0}, "unknown element 'Xx'"),
        ({"Fe": "7.5"}, "must be a real number"),
        ({"Fe": 7.5, 26: 7.4}, "Fe is given more than once"),
        ([1, 2], "give a mapping"),
    ],
)
def test_validation(data, message):
    with pytest.raises(ValueError, match=message):
        Mixture(data)


def test_equality_and_hash():
    a = Mixture({"H": 12.0, "Fe": 7.5}, name="a")
    b = Mixture({"Fe": 7.5, "H": 12.0}, name="b")
    c = Mixture({"H": 12.0, "Fe": 7.4})
    assert a == b and hash(a) == hash(b)  # the name is not compared
    assert a != c and a != {"H": 12.0, "Fe": 7.5}
    assert len({a, b, c}) == 2
    assert pickle.loads(pickle.dumps(a)) == a
    assert pickle.loads(pickle.dumps(a)).name == "a"
    with pytest.raises(AttributeError):
        a.foo = 1  # type: ignore[attr-defined]


def test_scaled():
    sun = Mixture.solar("AGSS09")
    m = sun.scaled(metallicity=-1.0, alpha=0.4)
    assert m.name == "AGSS09 [M/H]=-1.00 [a/M]=+0.40"
    assert m["H"] == sun["H"] and m["He"] == sun["He"]
    assert m["Fe"] == pytest.approx(sun["Fe"] - 1.0)
    for el in ALPHA_ELEMENTS:
        assert m[el] == pytest.approx(sun[el] - 0.6), el
    assert m["C"] == pytest.approx(sun["C"] - 1.0) and m["N"] == pytest.approx(sun["N"] - 1.0)
    assert sun.scaled(-2.0).name == "AGSS09 [M/H]=-2.00"
    assert sun.scaled(-1.0).scaled(-0.5, alpha=0.2).name == "AGSS09 [M/H]=-1.50 [a/M]=+0.20"
    assert sun.scaled() == sun and sun.scaled().name == "AGSS09"
    assert m.mass_fractions().Z < sun.mass_fractions().Z
    for bad in (float("nan"), "1", None):
        with pytest.raises(ValueError, match="metallicity must be a finite number"):
            sun.scaled(bad)  # type: ignore[arg-type]


def test_with_abundances():
    sun = Mixture.solar("AGSS09")
    m = sun.with_abundances(He=11.0)
    assert m["He"] == 11.0 and m["Fe"] == sun["Fe"] and m.name == "AGSS09 (modified)"
    m2 = sun.with_abundances({"He": 11.0, 3: None}, Fe=7.0)
    assert m2["Fe"] == 7.0 and "Li" not in m2 and len(m2) == len(sun) - 1
    m3 = Mixture({"H": 12.0}).with_abundances(Li=3.3)
    assert m3.elements == ("H", "Li")
    assert sun.with_abundances() == sun
    with pytest.raises(ValueError, match="abundance of He is not finite"):
        sun.with_abundances(He=float("nan"))
    with pytest.raises(ValueError, match="He is given more than once"):
        sun.with_abundances({"He": 11.0}, He=10.9)
    with pytest.raises(ValueError, match="empty mixture"):
        Mixture({"H": 12.0}).with_abundances(H=None)
    with pytest.raises(ValueError, match="unknown element"):
        sun.with_abundances(Xx=1.0)


def test_repr_and_describe():
    sun = Mixture.solar("AGSS09")
    r = repr(sun)
    assert r.startswith("<Mixture 'AGSS09': 83 elements") and r.count("\n") <= 2 and len(r) < 200
    text = sun.describe()
    assert str(sun) == text
    assert "X = 0.737" in text and text.count("\n") == 3 + len(sun) - 1
    assert " 26  Fe    7.500" in text


@given(
    hs.dictionaries(hs.sampled_from(SYMBOLS), hs.floats(ABUNDANCE_RANGE[0], ABUNDANCE_RANGE[1]), min_size=1,
                    max_size=20),
    hs.floats(-5, 1),
    hs.floats(-1, 1),
)
@settings(deadline=None, max_examples=100)
def test_mixture_properties(data, mh, am):
    m = Mixture(data)
    assert m.number_fractions.sum() == pytest.approx(1.0)
    assert sum(m.mass_fractions()) == pytest.approx(1.0)
    assert np.all(np.diff(m.atomic_numbers) > 0)
    assert Mixture(dict(m)) == m
    try:
        s = m.scaled(mh, am)
    except ValueError as exc:  # shifted out of the accepted range
        assert "outside the accepted range" in str(exc)
        return
    back = s.scaled(-mh, -am)
    np.testing.assert_allclose(back.log_eps, m.log_eps, atol=1e-12)
