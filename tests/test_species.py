"""Elements and species: symbols, parsing of every accepted spelling, round trips and error messages."""

from __future__ import annotations

import pickle

import pytest
from hypothesis import given, settings
from hypothesis import strategies as hs

from ionbal.data import SYMBOLS, Species, atomic_number, parse_element, parse_species, symbol
from ionbal.data.species import from_roman, to_roman


# ----------------------------------------------------------------------------- elements

def test_symbols_cover_h_to_u():
    assert len(SYMBOLS) == 92
    assert SYMBOLS[0] == "H" and SYMBOLS[25] == "Fe" and SYMBOLS[91] == "U"
    assert len(set(SYMBOLS)) == 92
    # no two symbols differ only by case (so lower-case input is unambiguous)
    assert len({s.lower() for s in SYMBOLS}) == 92


def test_periodic_table_order_against_periodictable_package():
    # independent list of element symbols: the periodictable package (PyPI)
    periodictable = pytest.importorskip("periodictable")
    for el in periodictable.elements:
        if 1 <= el.number <= 92:
            assert SYMBOLS[el.number - 1] == el.symbol


@pytest.mark.parametrize("given_, z", [("Fe", 26), ("fe", 26), (26, 26), (" Fe ", 26), ("U", 92), ("h", 1)])
def test_atomic_number(given_, z):
    assert atomic_number(given_) == z
    assert parse_element(given_) == z
    assert symbol(z) == SYMBOLS[z - 1]


@pytest.mark.parametrize("bad", ["Xx", "", "FE", "CO", 0, 93, -1, True, 26.0, None])
def test_atomic_number_rejects(bad):
    with pytest.raises(ValueError, match="element|atomic number"):
        atomic_number(bad)


def test_all_caps_symbol_error_suggests_spelling():
    with pytest.raises(ValueError, match="did you mean 'Co'"):
        atomic_number("CO")


def test_parse_element_of_species():
    assert parse_element(Species(26, 1)) == 26


# ----------------------------------------------------------------------------- roman numerals

def test_roman_numerals_known_values():
    # common practice: spectroscopic stage notation
    assert [to_roman(i) for i in (1, 2, 3, 4, 9, 14, 40, 49, 90, 93)] == [
        "I", "II", "III", "IV", "IX", "XIV", "XL", "XLIX", "XC", "XCIII"]


@given(hs.integers(1, 93))
@settings(deadline=None)
def test_roman_round_trip(n):
    assert from_roman(to_roman(n)) == n
    assert from_roman(to_roman(n).lower()) == n


# ----------------------------------------------------------------------------- Species

def test_species_names():
    assert Species(26, 0).name == "Fe I"
    assert str(Species(26, 1)) == "Fe II"
    assert Species(92, 92).name == "U XCIII"
    assert Species(1, -1).name == "H-"
    assert Species(26, 1).element == "Fe"
    assert Species(26, 3).stage == 4
    assert Species(2, 2).is_bare and not Species(2, 1).is_bare
    assert repr(Species(26, 1)) == "Species('Fe II')"


def test_species_is_immutable_hashable_ordered():
    s = Species(26, 1)
    with pytest.raises(AttributeError):
        s.Z = 3  # type: ignore[misc]
    assert {s: 1}[Species(26, 1)] == 1
    assert sorted([Species(26, 1), Species(1, 0), Species(26, 0)]) == [Species(1, 0), Species(26, 0), Species(26, 1)]
    assert pickle.loads(pickle.dumps(s)) == s


@pytest.mark.parametrize(
    "z, charge, message",
    [
        (1, 2, "impossible for H"),
        (26, 27, "valid charges are 0..26"),
        (26, -1, "only negative ion is H-"),
        (1, -2, "only negative ion is H-"),
        (0, 0, "out of range"),
        (93, 0, "out of range"),
    ],
)
def test_species_rejects_impossible(z, charge, message):
    with pytest.raises(ValueError, match=message):
        Species(z, charge)


def test_species_rejects_non_integers():
    with pytest.raises(ValueError, match="integer"):
        Species(26.0, 1)  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="integer"):
        Species(26, True)


# ----------------------------------------------------------------------------- parse_species

FE_II_SPELLINGS = ["Fe II", "fe ii", "Fe ii", "Fe_II", "  Fe   II ", "Fe+", "Fe+1", "Fe1+", "Fe 1+", "Fe^+",
                   ("Fe", 1), (26, 1), ("fe", 1), Species(26, 1)]


@pytest.mark.parametrize("text", FE_II_SPELLINGS)
def test_parse_fe_ii_spellings(text):
    assert parse_species(text) == Species(26, 1)


@pytest.mark.parametrize(
    "text, expected",
    [
        ("Fe", Species(26, 0)),
        ("Fe0", Species(26, 0)),
        ("Fe 0", Species(26, 0)),
        ("Fe I", Species(26, 0)),
        ("Fe++", Species(26, 2)),
        ("Fe+2", Species(26, 2)),
        ("Fe2+", Species(26, 2)),
        ("Fe 2+", Species(26, 2)),
        ("Fe^2+", Species(26, 2)),
        ("Fe+++", Species(26, 3)),
        ("Fe XXVII", Species(26, 26)),
        ("U XCIII", Species(92, 92)),
        ("H-", Species(1, -1)),
        ("H1-", Species(1, -1)),
        ("H 1-", Species(1, -1)),
        ("H^-", Species(1, -1)),
        ("h-", Species(1, -1)),
        ("H II", Species(1, 1)),
        ("C", Species(6, 0)),
        ("Co II", Species(27, 1)),
        ("Bi I", Species(83, 0)),
        ("B I", Species(5, 0)),
    ],
)
def test_parse_species_forms(text, expected):
    assert parse_species(text) == expected


@pytest.mark.parametrize(
    "bad, message",
    [
        ("Xx II", "unknown element 'Xx'"),
        ("H III", "impossible for H"),
        ("He IV", "impossible for He"),
        ("Fe XXVIII", "impossible for Fe"),
        ("Fe-", "only negative ion is H-"),
        ("O 1-", "only negative ion is H-"),
        ("H--", "cannot parse"),
        ("H 2-", "only negative ion is H-"),
        ("FeII", "cannot parse"),
        ("Fe IIII", "not a roman numeral"),
        ("FE II", "did you mean 'Fe'"),
        ("", "cannot parse"),
        ((26, 1.5), "charge must be an integer"),
        ((26, 27), "impossible for Fe"),
        (("Xx", 0), "unknown element"),
        ((1, 2, 3), "cannot parse"),
        (26, "cannot parse"),
        (None, "cannot parse"),
    ],
)
def test_parse_species_errors(bad, message):
    with pytest.raises(ValueError, match=message):
        parse_species(bad)


def test_error_lists_accepted_forms():
    with pytest.raises(ValueError, match="accepted forms: 'Fe I'"):
        parse_species("Fe?")


_species = hs.integers(1, 92).flatmap(lambda z: hs.tuples(hs.just(z), hs.integers(-1 if z == 1 else 0, z)))


@given(_species)
@settings(deadline=None, max_examples=300)
def test_round_trips(zq):
    z, q = zq
    sp = Species(z, q)
    # canonical name, underscore form, lower case, tuple forms and charge notation all round-trip
    assert parse_species(sp.name) == sp
    assert parse_species(sp.name.lower()) == sp
    assert parse_species(sp.name.replace(" ", "_")) == sp
    assert parse_species((z, q)) == sp
    assert parse_species((sp.element, q)) == sp
    if q >= 0:
        assert parse_species(f"{sp.element}{q}+" if q else sp.element) == sp
        assert parse_species(sp.element + "+" * q) == sp
        assert parse_species(f"{sp.element} {to_roman(q + 1).lower()}") == sp
