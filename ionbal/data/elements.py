"""Chemical elements H to U (Z = 1-92): symbols, atomic numbers and masses.

The atomic masses are the IUPAC abridged standard atomic weights of 2021
(Prohaska et al. 2022, Pure Appl. Chem. 94, 573), read from the generated
table ``ionbal/tables/atomic_masses.ecsv``.  Elements without a standard
atomic weight (Tc, Pm, Po, At, Rn, Fr, Ra, Ac) carry the mass number of their
longest-lived isotope, as is common practice; the table flags them.
"""

from __future__ import annotations

import numbers
from functools import lru_cache

import numpy as np

__all__ = ["SYMBOLS", "Z_MAX", "atomic_number", "symbol", "atomic_mass", "atomic_masses"]

#: Element symbols, index ``Z - 1`` for Z = 1..92.
SYMBOLS: tuple[str, ...] = tuple(
    """
    H He Li Be B C N O F Ne Na Mg Al Si P S Cl Ar K Ca Sc Ti V Cr Mn Fe Co Ni
    Cu Zn Ga Ge As Se Br Kr Rb Sr Y Zr Nb Mo Tc Ru Rh Pd Ag Cd In Sn Sb Te I Xe
    Cs Ba La Ce Pr Nd Pm Sm Eu Gd Tb Dy Ho Er Tm Yb Lu Hf Ta W Re Os Ir Pt Au
    Hg Tl Pb Bi Po At Rn Fr Ra Ac Th Pa U
    """.split()
)

#: Highest atomic number covered by the package.
Z_MAX: int = len(SYMBOLS)

_BY_SYMBOL: dict[str, int] = {s: i + 1 for i, s in enumerate(SYMBOLS)}
_BY_LOWER: dict[str, int] = {s.lower(): i + 1 for i, s in enumerate(SYMBOLS)}


def _lookup_symbol(text: str) -> int | None:
    """Return Z for an element symbol, or None.

    Accepted spellings: the canonical one (``"Fe"``) and all lower case
    (``"fe"``); a single upper-case letter (``"C"``) is canonical anyway.
    All-capital two-letter strings (``"FE"``, ``"CO"``) are *not* accepted:
    they read like molecules (``CO`` is carbon monoxide, not cobalt).
    """
    if text in _BY_SYMBOL:
        return _BY_SYMBOL[text]
    if text.islower() and text in _BY_LOWER:
        return _BY_LOWER[text]
    return None


def _symbol_error(text: str) -> ValueError:
    hint = ""
    if text.lower() in _BY_LOWER:
        hint = f" (did you mean {SYMBOLS[_BY_LOWER[text.lower()] - 1]!r}? write symbols as 'Fe' or 'fe')"
    return ValueError(
        f"unknown element {text!r}{hint}; valid elements are Z = 1..{Z_MAX}, "
        f"symbols {SYMBOLS[0]}, {SYMBOLS[1]}, ..., {SYMBOLS[-1]}"
    )


def atomic_number(element: str | int) -> int:
    """Atomic number of an element given by symbol or by Z.

    Parameters
    ----------
    element
        Symbol (``"Fe"`` or ``"fe"``) or atomic number (1..92).

    Returns
    -------
    int

    Raises
    ------
    ValueError
        If the element is not one of H..U.
    """
    if isinstance(element, bool):
        raise ValueError(f"unknown element {element!r}; expected a symbol or Z = 1..{Z_MAX}")
    if isinstance(element, numbers.Integral):
        z = int(element)
        if not 1 <= z <= Z_MAX:
            raise ValueError(f"atomic number {z} out of range; valid Z = 1..{Z_MAX} (H..U)")
        return z
    if isinstance(element, str):
        z_found = _lookup_symbol(element.strip())
        if z_found is None:
            raise _symbol_error(element.strip())
        return z_found
    raise ValueError(
        f"cannot interpret {element!r} (type {type(element).__name__}) as an element; "
        f"expected a symbol such as 'Fe' or an atomic number 1..{Z_MAX}"
    )


def symbol(z: int | str) -> str:
    """Canonical element symbol for an atomic number (or a symbol in any accepted spelling)."""
    return SYMBOLS[atomic_number(z) - 1]


@lru_cache(maxsize=1)
def atomic_masses() -> np.ndarray:
    """Atomic masses in u as a read-only array of shape (93,), index Z (entry 0 is NaN)."""
    from ._files import _read_ecsv

    names, rows = _read_ecsv("atomic_masses.ecsv")
    iz, im = names.index("Z"), names.index("atomic_mass")
    out = np.full(Z_MAX + 1, np.nan)
    for r in rows:
        out[int(r[iz])] = float(r[im])
    out.setflags(write=False)
    return out


def atomic_mass(element: str | int) -> float:
    """Standard atomic weight in unified atomic mass units (u).

    IUPAC 2021 abridged values (Prohaska et al. 2022, Pure Appl. Chem. 94,
    573); mass number of the longest-lived isotope for elements without a
    standard atomic weight.
    """
    return float(atomic_masses()[atomic_number(element)])
