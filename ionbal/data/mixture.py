"""Chemical mixtures: element abundances on the A(X) = log10(N_X / N_H) + 12 scale.

A :class:`Mixture` is an immutable, hashable set of (element, A(X)) pairs.
Hydrogen is not required: a hydrogen-free mixture is valid, and A(X) then
only gives relative abundances (any constant offset is irrelevant).

Solar sets (:meth:`Mixture.solar`)
----------------------------------
``"AG89"``   Anders & Grevesse 1989, Geochim. Cosmochim. Acta 53, 197
``"GS98"``   Grevesse & Sauval 1998, Space Sci. Rev. 85, 161
``"AGSS09"`` Asplund, Grevesse, Sauval & Scott 2009, ARA&A 47, 481 (Table 1)
``"AAG21"``  Asplund, Amarsi & Grevesse 2021, A&A 653, A141 (Table 2)
``"LPG09"``  Lodders, Palme & Gail 2009, Landolt-Boernstein VI/4B

For AGSS09 and AAG21 the photospheric value is used where the paper gives one
and the CI-chondrite (meteoritic) value otherwise, which the papers already
place on the photospheric scale; this is how those papers form their
recommended solar mixtures.  Elements with no value in a set are left out.

Scaling (:meth:`Mixture.scaled`)
--------------------------------
``[M/H]`` shifts every element heavier than He; ``[alpha/M]`` additionally
shifts the alpha elements O, Ne, Mg, Si, S, Ar, Ca, Ti (common practice).

Validation
----------
Every A(X) must be finite and lie in [-15, 15] (:data:`ABUNDANCE_RANGE`).  The
range admits very metal-poor compositions and hydrogen-poor ones written on
the H = 12 scale; values outside it almost always mean a linear abundance or a
wrong scale was passed.
"""

from __future__ import annotations

import math
import numbers
from collections import namedtuple
from collections.abc import Mapping
from functools import lru_cache
from typing import Any, Iterator

import numpy as np

from .elements import SYMBOLS, atomic_masses, atomic_number

__all__ = ["Mixture", "MassFractions", "SOLAR_MIXTURES", "ALPHA_ELEMENTS", "ABUNDANCE_RANGE", "ATOMIC_MASS_UNIT_G"]

#: Keys accepted by :meth:`Mixture.solar`.
SOLAR_MIXTURES: tuple[str, ...] = ("AG89", "GS98", "AGSS09", "AAG21", "LPG09")
_SOLAR_BY_UPPER = {k.upper(): k for k in SOLAR_MIXTURES}
#: Elements shifted by ``alpha`` in :meth:`Mixture.scaled`.
ALPHA_ELEMENTS: tuple[str, ...] = ("O", "Ne", "Mg", "Si", "S", "Ar", "Ca", "Ti")
#: Allowed range of A(X).
ABUNDANCE_RANGE: tuple[float, float] = (-15.0, 15.0)
#: Atomic mass constant in g (CODATA 2018).
ATOMIC_MASS_UNIT_G: float = 1.66053906660e-24

_ALPHA_Z = frozenset(atomic_number(s) for s in ALPHA_ELEMENTS)

#: Mass fractions of hydrogen (X), helium (Y) and everything heavier (Z).
MassFractions = namedtuple("MassFractions", ["X", "Y", "Z"])


def _check_value(z: int, value: Any) -> float:
    el = SYMBOLS[z - 1]
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise ValueError(f"abundance of {el} must be a real number A(X), got {value!r}")
    v = float(value)
    if not math.isfinite(v):
        raise ValueError(f"abundance of {el} is not finite: {value!r}")
    lo, hi = ABUNDANCE_RANGE
    if not lo <= v <= hi:
        raise ValueError(
            f"abundance of {el} A(X) = {v:g} is outside the accepted range [{lo:g}, {hi:g}] "
            f"(A(X) = log10(N_X/N_H) + 12; did you pass a linear abundance?)"
        )
    return v


def _items(data: Any) -> list[tuple[Any, Any]]:
    if isinstance(data, Mapping):
        return list(data.items())
    try:
        return [(k, v) for k, v in data]
    except (TypeError, ValueError):
        raise ValueError(
            f"cannot build a Mixture from {type(data).__name__}; give a mapping {{element: A(X)}}"
        ) from None



def _element_key(key) -> int:
    """Z of an abundance key, in any letter case (``"Fe"``, ``"fe"``, ``"FE"``).

    A key of an abundance mapping is always an element, so the all-capitals spelling that
    :func:`~ionbal.data.elements.atomic_number` refuses (``"CO"`` could be a molecule) is safe here.
    """
    try:
        return atomic_number(key)
    except ValueError as first:
        if isinstance(key, str) and key.strip().isalpha():
            try:
                return atomic_number(key.strip().capitalize())
            except ValueError:
                pass
        raise first from None


class Mixture(Mapping):
    """An immutable chemical mixture.

    Parameters
    ----------
    abundances
        Mapping ``{element: A(X)}`` with elements as symbols (``"Fe"``) or
        atomic numbers (26) and A(X) = log10(N_X/N_H) + 12.  Hydrogen is not
        required.
    name
        A label; ``"custom"`` by default.

    Notes
    -----
    A Mixture is a read-only mapping ``symbol -> A(X)`` ordered by Z.  Two
    mixtures are equal (and hash equally) when they hold the same elements
    with exactly the same A(X); the name is not compared.

    Examples
    --------
    >>> m = Mixture.solar("AGSS09").scaled(metallicity=-1.0, alpha=0.4)
    >>> round(m["Fe"], 2), round(m["O"], 2)
    (6.5, 8.09)
    """

    __slots__ = ("_z", "_a", "_name", "_hash", "_base", "_mh", "_am")

    def __init__(self, abundances: Mapping[str | int, float], name: str = "custom") -> None:
        values: dict[int, float] = {}
        for key, value in _items(abundances):
            z = _element_key(key)
            if z in values:
                raise ValueError(f"element {SYMBOLS[z - 1]} is given more than once")
            values[z] = _check_value(z, value)
        if not values:
            raise ValueError("a Mixture needs at least one element")
        zs = tuple(sorted(values))
        self._z: tuple[int, ...] = zs
        self._a: tuple[float, ...] = tuple(values[z] for z in zs)
        self._name = str(name)
        self._hash = hash((self._z, self._a))
        self._base = self._name
        self._mh = 0.0
        self._am = 0.0

    # ------------------------------------------------------------------ constructors
    @classmethod
    def solar(cls, key: str = "AGSS09") -> "Mixture":
        """A solar abundance set: ``"AG89"``, ``"GS98"``, ``"AGSS09"`` (default), ``"AAG21"``, ``"LPG09"``."""
        key = _SOLAR_BY_UPPER.get(str(key).strip().upper(), key) if isinstance(key, str) else key
        if key not in SOLAR_MIXTURES:
            raise ValueError(f"unknown solar mixture {key!r}; valid keys are {', '.join(SOLAR_MIXTURES)}")
        return _solar(key)

    # ------------------------------------------------------------------ mapping protocol
    def __getitem__(self, element: str | int) -> float:
        z = atomic_number(element)
        try:
            return self._a[self._z.index(z)]
        except ValueError:
            raise KeyError(f"element {SYMBOLS[z - 1]} is not in mixture {self._name!r}") from None

    def __contains__(self, element: object) -> bool:
        try:
            z = atomic_number(element)  # type: ignore[arg-type]
        except ValueError:
            return False
        return z in self._z

    def __iter__(self) -> Iterator[str]:
        return (SYMBOLS[z - 1] for z in self._z)

    def __len__(self) -> int:
        return len(self._z)

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Mixture):
            return NotImplemented
        return self._z == other._z and self._a == other._a

    def __hash__(self) -> int:
        return self._hash

    def __reduce__(self):
        return (_rebuild, (dict(zip(self._z, self._a)), self._name, self._base, self._mh, self._am))

    # ------------------------------------------------------------------ attributes
    @property
    def name(self) -> str:
        """Label, e.g. ``"AGSS09"``, ``"AGSS09 [M/H]=-1.00 [a/M]=+0.40"`` or ``"custom"``."""
        return self._name

    @property
    def elements(self) -> tuple[str, ...]:
        """Element symbols, ordered by Z."""
        return tuple(SYMBOLS[z - 1] for z in self._z)

    @property
    def atomic_numbers(self) -> np.ndarray:
        """Atomic numbers (int64), ordered by Z."""
        return np.array(self._z, dtype=np.int64)

    @property
    def log_eps(self) -> np.ndarray:
        """A(X) of each element, aligned with :attr:`atomic_numbers`."""
        return np.array(self._a, dtype=np.float64)

    @property
    def number_fractions(self) -> np.ndarray:
        """Fraction of all nuclei that belong to each element (sums to 1)."""
        a = self.log_eps
        eps = 10.0 ** (a - a.max())
        return eps / eps.sum()

    @property
    def masses(self) -> np.ndarray:
        """Atomic mass (u) of each element."""
        return atomic_masses()[self.atomic_numbers]

    @property
    def element_mass_fractions(self) -> np.ndarray:
        """Mass fraction of each element (sums to 1)."""
        w = self.number_fractions * self.masses
        return w / w.sum()

    @property
    def mean_atomic_mass(self) -> float:
        """Mean mass per nucleus in u (neutral-atom masses)."""
        return float(np.sum(self.number_fractions * self.masses))

    @property
    def mean_mass_per_nucleus(self) -> float:
        """Mean mass per nucleus in g (neutral-atom masses)."""
        return self.mean_atomic_mass * ATOMIC_MASS_UNIT_G

    def mass_fractions(self) -> MassFractions:
        """Mass fractions ``(X, Y, Z)`` of hydrogen, helium and heavier elements."""
        w = self.element_mass_fractions
        zs = self.atomic_numbers
        x = float(w[zs == 1].sum())
        y = float(w[zs == 2].sum())
        return MassFractions(x, y, float(w[zs > 2].sum()))

    # ------------------------------------------------------------------ derived mixtures
    def scaled(self, metallicity: float = 0.0, alpha: float = 0.0) -> "Mixture":
        """A copy with [M/H] and [alpha/M] applied.

        Parameters
        ----------
        metallicity
            [M/H] in dex, added to A(X) of every element heavier than He.
        alpha
            [alpha/M] in dex, added in addition to A(X) of O, Ne, Mg, Si, S,
            Ar, Ca, Ti (those present).
        """
        for label, v in (("metallicity", metallicity), ("alpha", alpha)):
            if isinstance(v, bool) or not isinstance(v, numbers.Real) or not math.isfinite(float(v)):
                raise ValueError(f"{label} must be a finite number (dex), got {v!r}")
        m, a = float(metallicity), float(alpha)
        values = {}
        for z, val in zip(self._z, self._a):
            if z > 2:
                val = val + m + (a if z in _ALPHA_Z else 0.0)
            values[z] = val
        mh, am = self._mh + m, self._am + a
        name = f"{self._base} [M/H]={mh:+.2f}" + (f" [a/M]={am:+.2f}" if am != 0.0 else "")
        if mh == 0.0 and am == 0.0:
            name = self._base
        return _rebuild(values, name, self._base, mh, am)

    def with_abundances(self, abundances: Mapping[str | int, float | None] | None = None, /,
                        **kwargs: float | None) -> "Mixture":
        """A copy with some A(X) replaced or added (``None`` removes an element).

        Examples
        --------
        >>> Mixture.solar().with_abundances(He=11.0, Li=None)["He"]
        11.0
        """
        changes: dict[int, float | None] = {}
        for key, value in _items(abundances or {}) + list(kwargs.items()):
            z = _element_key(key)
            if z in changes:
                raise ValueError(f"element {SYMBOLS[z - 1]} is given more than once")
            changes[z] = value
        if not changes:
            return self
        values = dict(zip(self._z, self._a))
        for z, value in changes.items():
            if value is None:
                values.pop(z, None)
            else:
                values[z] = _check_value(z, value)
        if not values:
            raise ValueError("removing these elements would leave an empty mixture")
        name = f"{self._name} (modified)"
        return _rebuild(values, name, name, 0.0, 0.0)

    # ------------------------------------------------------------------ display
    def __repr__(self) -> str:
        x, y, zm = self.mass_fractions()
        shown = [f"{SYMBOLS[z - 1]}={a:.2f}" for z, a in zip(self._z, self._a)]
        if len(shown) > 8:
            shown = shown[:6] + ["...", shown[-1]]
        return (
            f"<Mixture {self._name!r}: {len(self._z)} elements, X={x:.4f} Y={y:.4f} Z={zm:.4f}\n"
            f"  {' '.join(shown)}>"
        )

    def describe(self) -> str:
        """A table of every element: Z, symbol, A(X), number fraction, mass fraction."""
        x, y, zm = self.mass_fractions()
        lines = [
            f"Mixture {self._name!r}: {len(self._z)} elements",
            f"X = {x:.5f}   Y = {y:.5f}   Z = {zm:.5f}   mean mass per nucleus = {self.mean_atomic_mass:.5f} u",
            f"{'Z':>3}  {'El':<2}  {'A(X)':>7}  {'number frac':>11}  {'mass frac':>10}",
        ]
        for z, a, nf, mf in zip(self._z, self._a, self.number_fractions, self.element_mass_fractions):
            lines.append(f"{z:>3}  {SYMBOLS[z - 1]:<2}  {a:7.3f}  {nf:11.4e}  {mf:10.4e}")
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.describe()


def _rebuild(values: dict, name: str, base: str, mh: float, am: float) -> Mixture:
    """A Mixture with its naming state (base name and accumulated [M/H], [a/M]); also used by pickle."""
    out = Mixture(values, name=name)
    out._base, out._mh, out._am = base, mh, am
    return out


@lru_cache(maxsize=None)
def _solar(key: str) -> Mixture:
    from ._files import _read_ecsv

    names, rows = _read_ecsv("abundances.ecsv")
    iz, ik = names.index("Z"), names.index(key)
    values = {int(r[iz]): float(r[ik]) for r in rows if r[ik].strip() != ""}
    return Mixture(values, name=key)
