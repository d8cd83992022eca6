"""Atomic species: an element in a given ionization stage.

A :class:`Species` is identified by its atomic number ``Z`` and its charge
(0 = neutral).  The canonical name uses the spectroscopic notation with a
roman numeral for the stage, ``stage = charge + 1``: ``"Fe I"`` is neutral
iron, ``"Fe II"`` is Fe+, ..., ``"U XCIII"`` is the bare uranium nucleus.
The only negative ion is the hydrogen anion ``"H-"`` (charge -1).

Accepted spellings in :func:`parse_species`
-------------------------------------------
* spectroscopic: ``"Fe I"``, ``"Fe II"``, ``"Fe_II"``, ``"fe ii"``; the
  roman numeral is case-insensitive and must be separated from the symbol by a
  space or an underscore (``"FeII"`` is refused: ``"BI"`` could be B I or Bi);
* charge notation: ``"Fe"`` and ``"Fe0"`` (neutral), ``"Fe+"``, ``"Fe++"``,
  ``"Fe+2"``, ``"Fe2+"``, ``"Fe 2+"``, ``"Fe^2+"``; ``"H-"``, ``"H1-"``,
  ``"H^-"`` for the hydrogen anion;
* a tuple ``(Z, charge)`` with ``Z`` an int or a symbol, e.g. ``(26, 1)`` or
  ``("Fe", 1)``;
* a :class:`Species` (returned unchanged).

Element symbols are accepted in canonical (``"Fe"``) or all-lower-case
(``"fe"``) spelling.  All-capital symbols (``"FE"``, ``"CO"``) are refused
because they read like molecules (CO is carbon monoxide, not cobalt).
"""

from __future__ import annotations

import numbers
import re
from dataclasses import dataclass
from typing import Any, Union

from .elements import SYMBOLS, Z_MAX, _lookup_symbol, _symbol_error, atomic_number

__all__ = ["Species", "SpeciesLike", "parse_species", "parse_element", "to_roman", "from_roman"]

_ROMAN_VALUES = (
    (100, "C"), (90, "XC"), (50, "L"), (40, "XL"), (10, "X"), (9, "IX"),
    (5, "V"), (4, "IV"), (1, "I"),
)


def to_roman(n: int) -> str:
    """Roman numeral for 1 <= n <= 399 (``to_roman(93) == "XCIII"``)."""
    if not 1 <= n <= 399:
        raise ValueError(f"roman numerals are supported for 1..399, got {n}")
    out = []
    for value, letters in _ROMAN_VALUES:
        while n >= value:
            out.append(letters)
            n -= value
    return "".join(out)


_ROMAN_TO_INT = {to_roman(i): i for i in range(1, Z_MAX + 2)}


def from_roman(text: str) -> int:
    """Integer value of a canonical roman numeral between I and XCIII (case-insensitive)."""
    value = _ROMAN_TO_INT.get(text.upper())
    if value is None:
        raise ValueError(f"{text!r} is not a roman numeral between I and {to_roman(Z_MAX + 1)}")
    return value


def _check(z: int, charge: int) -> None:
    if not 1 <= z <= Z_MAX:
        raise ValueError(f"atomic number {z} out of range; valid Z = 1..{Z_MAX} (H..U)")
    el = SYMBOLS[z - 1]
    if charge < -1:
        raise ValueError(f"charge {charge} of {el} is not supported; the only negative ion is H- (charge -1)")
    if charge == -1 and z != 1:
        raise ValueError(f"negative ion {el}- is not supported; the only negative ion is H- (charge -1)")
    if charge > z:
        raise ValueError(
            f"charge {charge} is impossible for {el} (Z = {z}); valid charges are 0..{z} "
            f"(stages {el} I .. {el} {to_roman(z + 1)})"
        )


@dataclass(frozen=True, order=True, slots=True)
class Species:
    """An element ``Z`` in ionization state ``charge``.

    Immutable and hashable; ordered by (Z, charge).

    Parameters
    ----------
    Z
        Atomic number, 1..92.
    charge
        Ion charge, 0..Z; -1 only for the hydrogen anion.

    Examples
    --------
    >>> Species(26, 1).name
    'Fe II'
    >>> str(Species(1, -1))
    'H-'
    """

    Z: int
    charge: int = 0

    def __post_init__(self) -> None:
        for field, value in (("Z", self.Z), ("charge", self.charge)):
            if isinstance(value, bool) or not isinstance(value, numbers.Integral):
                raise ValueError(f"Species.{field} must be an integer, got {value!r}")
        object.__setattr__(self, "Z", int(self.Z))
        object.__setattr__(self, "charge", int(self.charge))
        _check(self.Z, self.charge)

    # -- the species protocol (shared with molecules): label, charge, composition, kind ------------
    @property
    def composition(self) -> tuple:
        """Nuclei of the species as ``((Z, count), ...)`` sorted by Z; an atom or atomic ion is ``((Z, 1),)``."""
        return ((self.Z, 1),)

    @property
    def is_molecule(self) -> bool:
        """False: an atom or atomic ion (a molecule is a species of another class)."""
        return False

    @property
    def element(self) -> str:
        """Element symbol, e.g. ``"Fe"``."""
        return SYMBOLS[self.Z - 1]

    @property
    def stage(self) -> int:
        """Spectroscopic stage number, ``charge + 1`` (0 for H-)."""
        return self.charge + 1

    @property
    def n_electrons(self) -> int:
        """Number of bound electrons, ``Z - charge``."""
        return self.Z - self.charge

    @property
    def is_bare(self) -> bool:
        """True for a bare nucleus (no electrons left)."""
        return self.charge == self.Z

    @property
    def name(self) -> str:
        """Canonical name: ``"Fe I"``, ``"Fe II"``, ..., ``"H-"``."""
        if self.charge == -1:
            return "H-"
        return f"{self.element} {to_roman(self.charge + 1)}"

    def __str__(self) -> str:
        return self.name

    def __repr__(self) -> str:
        return f"Species({self.name!r})"

    @classmethod
    def from_name(cls, obj: "SpeciesLike") -> "Species":
        """Same as :func:`parse_species`."""
        return parse_species(obj)


SpeciesLike = Union[Species, str, tuple]

_RE_ROMAN = re.compile(r"^([A-Za-z]{1,2})[ _]+([IVXLCivxlc]+)$")
_RE_CHARGE = re.compile(
    r"""^([A-Za-z]{1,2})\s*\^?\s*
        (?: (?P<plus>\++) | (?P<minus>-) | (?P<n>\d+)\s*(?P<sign>[+-]) | (?P<sign2>[+-])\s*(?P<n2>\d+) | (?P<zero>0) )?$""",
    re.VERBOSE,
)

_ACCEPTED = (
    "accepted forms: 'Fe I', 'Fe II', 'Fe_II', 'fe ii', 'Fe', 'Fe0', 'Fe+', 'Fe++', 'Fe+2', "
    "'Fe2+', 'Fe 2+', 'H-', a tuple (Z or symbol, charge), or a Species"
)


def _element_from_text(text: str, original: str) -> int:
    z = _lookup_symbol(text)
    if z is None:
        err = _symbol_error(text)
        raise ValueError(f"cannot parse species {original!r}: {err}") from None
    return z


def _parse_string(text: str) -> Species:
    s = text.strip()
    m = _RE_ROMAN.match(s)
    if m:
        z = _element_from_text(m.group(1), text)
        try:
            stage = from_roman(m.group(2))
        except ValueError:
            raise ValueError(
                f"cannot parse species {text!r}: {m.group(2)!r} is not a roman numeral I..{to_roman(z + 1)}"
            ) from None
        try:
            return Species(z, stage - 1)
        except ValueError as exc:
            raise ValueError(f"cannot parse species {text!r}: {exc}") from None
    m = _RE_CHARGE.match(s)
    if m:
        z = _element_from_text(m.group(1), text)
        if m.group("plus"):
            charge = len(m.group("plus"))
        elif m.group("minus"):
            charge = -1
        elif m.group("n") is not None:
            charge = int(m.group("n")) * (1 if m.group("sign") == "+" else -1)
        elif m.group("n2") is not None:
            charge = int(m.group("n2")) * (1 if m.group("sign2") == "+" else -1)
        else:
            charge = 0
        try:
            return Species(z, charge)
        except ValueError as exc:
            raise ValueError(f"cannot parse species {text!r}: {exc}") from None
    raise ValueError(f"cannot parse species {text!r}; {_ACCEPTED}")


def parse_species(obj: Any) -> Species:
    """Interpret ``obj`` as a :class:`Species`.

    Parameters
    ----------
    obj
        A name (``"Fe II"``, ``"fe ii"``, ``"Fe_II"``, ``"Fe+"``, ``"Fe2+"``,
        ``"Fe"``, ``"H-"``, ...), a tuple ``(Z or symbol, charge)`` or a
        :class:`Species`.  See the module docstring for every accepted
        spelling.

    Returns
    -------
    Species

    Raises
    ------
    ValueError
        For an unknown element, an impossible charge (``"H III"``, charge > Z,
        charge < -1, negative ions other than H-) or an unreadable string.
    """
    if isinstance(obj, Species):
        return obj
    if isinstance(obj, str):
        return _parse_string(obj)
    if isinstance(obj, tuple) and len(obj) == 2:
        el, charge = obj
        if isinstance(charge, bool) or not isinstance(charge, numbers.Integral):
            raise ValueError(f"cannot parse species {obj!r}: charge must be an integer, got {charge!r}")
        try:
            return Species(atomic_number(el), int(charge))
        except ValueError as exc:
            raise ValueError(f"cannot parse species {obj!r}: {exc}") from None
    raise ValueError(f"cannot parse species {obj!r} (type {type(obj).__name__}); {_ACCEPTED}")


def parse_element(obj: Any) -> int:
    """Atomic number of an element given as symbol, Z, or a :class:`Species` (its element).

    Raises
    ------
    ValueError
        If the element is not one of H..U.
    """
    if isinstance(obj, Species):
        return obj.Z
    return atomic_number(obj)
