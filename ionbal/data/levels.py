"""Atomic partition functions from energy-level lists.

The partition function of a species is

    U(T) = sum_i g_i exp(-E_i / kT),      g_i = 2 J_i + 1,

summed over the bound levels i below the ionization limit.  This module
provides the public builder :func:`partition_function_from_levels` (for a
level list of your own), :func:`hydrogen_partition_function` (analytic H I)
and a reader, :func:`read_level_file`, for the NIST-extracted level lists
used to build the package tables.

Level-file format
-----------------
Line 1 holds the ionization energy in eV.  Then come rows ``J | E |`` with
``E`` in cm^-1; rows of dashes, blank rows and header rows are ignored and
``###`` ends the list.  The treatment of the irregular entries is:

J field
    * a single value (``"7/2"``, ``"3"``, ``"0."``, ``"10/2"``): g = 2J + 1;
    * a comma-separated list (``"7/2,9/2"``, ``"1,2,3"``): several levels that
      are not resolved from each other and share one energy; each J is a level
      of its own, so g = sum(2J + 1).  This is the physical meaning of the
      notation and is what the corrected (Nov 2022) calculation of
      Barklem & Collet (2016, A&A 588, A96) does;
    * alternatives joined by ``or`` (``"5/2 or 7/2"``, also ``"5/2, 3/2 or 1/2"``):
      one level whose J is one of the values; g = mean of the 2J + 1;
    * a trailing ``?`` (``"3/2?"``): the value is accepted;
    * missing J (``"---"`` or blank): the row is skipped.  In these lists such
      rows are series limits or term-averaged duplicates of levels that are
      listed with their J, so counting them would double count; the few
      genuinely unassigned levels lie high and weigh little;
    * a value that is not a multiple of 1/2 (``"1.2"``): skipped as unreadable.

E field
    * the leading number is the energy; NIST markers around or after it are
      accepted: ``[...]`` (derived/theoretical level), ``(...)`` (calculated),
      an uncertainty in parentheses ``12345.6(3)``, ``?`` (questionable),
      letters such as ``a``/``u`` (notes) and ``&dagger;``;
    * ``+x``, ``+y``, ... (level system with an unknown offset from the ground
      system): the level is included with the offset taken as 0, since these
      offsets are small compared with the level energy;
    * a blank energy with a valid J (a member of a term whose energy was not
      measured; these occur mostly in lanthanides): the level is kept and given
      the highest known energy of its term block (the rows between two blank
      rows), flagged ``"estimated"``.  Unobserved fine-structure members are
      usually at the edge of the multiplet, so this is a rough estimate; it
      is much closer to the calculation of Barklem & Collet (2016) than
      dropping the levels, which makes U of Pm II 20 % lower than theirs at
      9000 K.  If the block has no known energy the row is skipped.

Levels at or above the ionization limit are excluded (autoionizing levels and
series limits).  The package tables take the limit from the NIST (2024)
ionization energies, not from line 1 of the file.  (Barklem & Collet 2016 sum
the autoionizing levels too, which makes their U of Ca I and Sr I about 3 %
higher at 10,000 K.)  No lowering of the ionization limit is applied for
stages with level lists; only the infinite hydrogen series needs a cut-off
(see :data:`H_N_MAX`).

Constants are CODATA 2018 (Tiesinga et al. 2021, Rev. Mod. Phys. 93, 025010).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

import numpy as np

__all__ = [
    "C2_CM_K",
    "EV_TO_CM",
    "K_B_EV",
    "H_N_MAX",
    "H_INGLIS_TELLER_NE",
    "LevelList",
    "read_level_file",
    "statistical_weight",
    "parse_level_energy",
    "partition_function_from_levels",
    "hydrogen_partition_function",
    "inglis_teller_n_max",
]

#: Second radiation constant h c / k in cm K (CODATA 2018, exact).
C2_CM_K: float = 1.438776877
#: Boltzmann constant in eV / K (CODATA 2018, exact).
K_B_EV: float = 8.617333262e-5
#: One electronvolt in cm^-1 (CODATA 2018, exact).
EV_TO_CM: float = 8065.543937

#: Electron density (cm^-3) at which the hydrogen series is cut (a representative
#: photospheric value: about that of the solar photosphere at optical depth unity).
H_INGLIS_TELLER_NE: float = 1.0e14


def inglis_teller_n_max(electron_density_cm3: float) -> int:
    """Principal quantum number of the last resolvable hydrogen level.

    Inglis & Teller (1939, ApJ 90, 439): log10 n_e = 23.26 - 7.5 log10 n_max,
    with n_e in cm^-3 (relation quoted from memory).  Returns the integer part.
    """
    if not np.isfinite(electron_density_cm3) or electron_density_cm3 <= 0:
        raise ValueError(f"electron density must be positive and finite, got {electron_density_cm3!r}")
    return int(np.floor(10.0 ** ((23.26 - np.log10(electron_density_cm3)) / 7.5)))


#: Cut-off of the H I series used for the package table: n_max = 17, the
#: Inglis & Teller (1939) limit at n_e = 1e14 cm^-3.
H_N_MAX: int = inglis_teller_n_max(H_INGLIS_TELLER_NE)


# --------------------------------------------------------------------------- parsing

_RE_NUMBER = re.compile(r"^(\d+(?:\.\d*)?|\.\d+)")


def _j_value(text: str) -> float | None:
    """J from ``"7/2"``, ``"3"``, ``"0."``; None if not a non-negative multiple of 1/2."""
    t = text.strip()
    if not t:
        return None
    try:
        if "/" in t:
            num, den = t.split("/")
            j = float(num) / float(den)
        else:
            j = float(t)
    except ValueError:
        return None
    if j < 0 or abs(2 * j - round(2 * j)) > 1e-9:
        return None
    return round(2 * j) / 2


def statistical_weight(j_text: str) -> tuple[float | None, str]:
    """Statistical weight g for a J field of a level list.

    Parameters
    ----------
    j_text
        The J field, e.g. ``"7/2"``, ``"7/2,9/2"``, ``"5/2 or 7/2"``, ``"3/2?"``.

    Returns
    -------
    g, kind
        ``g`` is None when the row must be skipped.  ``kind`` is one of
        ``"single"``, ``"list"`` (comma-separated: g summed), ``"or"``
        (alternatives: g averaged), ``"missing"`` or ``"invalid"``; a ``"?"``
        suffix on the input adds ``"+questionable"``.
    """
    s = j_text.strip()
    suffix = ""
    if "?" in s:
        s = s.replace("?", "").strip()
        suffix = "+questionable"
    if not s or set(s) <= {"-"}:
        return None, "missing"
    if "or" in s:
        parts = [p for p in re.split(r",|\bor\b", s) if p.strip()]
        js = [_j_value(p) for p in parts]
        if not js or any(j is None for j in js):
            return None, "invalid"
        return float(np.mean([2 * j + 1 for j in js])), "or" + suffix
    if "," in s:
        parts = [p for p in s.split(",") if p.strip()]
        js = [_j_value(p) for p in parts]
        if not js or any(j is None for j in js):
            return None, "invalid"
        return float(sum(2 * j + 1 for j in js)), ("list" if len(js) > 1 else "single") + suffix
    j = _j_value(s)
    if j is None:
        return None, "invalid"
    return 2 * j + 1, "single" + suffix


def parse_level_energy(e_text: str) -> tuple[float | None, frozenset[str]]:
    """Energy (cm^-1) and markers of an energy field of a level list.

    Returns
    -------
    energy, flags
        ``energy`` is None for a blank or unreadable field.  ``flags`` may
        contain ``"bracketed"`` (``[...]``), ``"parenthesized"`` (``(...)``),
        ``"uncertainty"`` (``123.4(5)``), ``"questionable"`` (``?``),
        ``"offset"`` (``+x``, ``+y``, ...: the offset is taken as 0) and
        ``"note"`` (other trailing markers such as ``a``, ``u``, ``&dagger;``).
        :func:`read_level_file` adds ``"estimated"`` for levels whose energy
        was missing and has been estimated.
    """
    s = e_text.strip()
    flags: set[str] = set()
    if "&dagger;" in s:
        s = s.replace("&dagger;", "")
        flags.add("note")
    if "[" in s or "]" in s:
        flags.add("bracketed")
        s = s.replace("[", "").replace("]", "")
    s = s.strip()
    if s.startswith("(") and s.endswith(")"):
        flags.add("parenthesized")
        s = s[1:-1].strip()
    if "?" in s:
        flags.add("questionable")
        s = s.replace("?", "")
    m = _RE_NUMBER.match(s)
    if not m:
        return None, frozenset(flags)
    rest = s[m.end():].strip()
    unc = re.match(r"^\(\d+\)", rest)
    if unc:
        flags.add("uncertainty")
        rest = rest[unc.end():].strip()
    if re.search(r"\+\s*[a-z]", rest):
        flags.add("offset")
        rest = re.sub(r"\+\s*[a-z]", "", rest).strip()
    if rest:
        flags.add("note")
    return float(m.group(1)), frozenset(flags)


@dataclass(frozen=True)
class LevelList:
    """Levels read from a level file.

    Attributes
    ----------
    ionization_energy
        Ionization energy from line 1 of the file (eV); NaN if unreadable.
    energy
        Level energies (cm^-1) of the usable rows.
    g
        Statistical weights of the usable rows.
    j_text
        The J field of each usable row, as written.
    energy_flags
        Markers of each usable row's energy field (see :func:`parse_level_energy`).
    j_kind
        How each usable row's J field was read (see :func:`statistical_weight`).
    skipped
        ``(line number, line, reason)`` for every level row that was not usable.
    """

    ionization_energy: float
    energy: np.ndarray
    g: np.ndarray
    j_text: tuple[str, ...] = field(repr=False)
    energy_flags: tuple[frozenset, ...] = field(repr=False)
    j_kind: tuple[str, ...] = field(repr=False)
    skipped: tuple[tuple[int, str, str], ...] = field(repr=False)

    def below(self, limit_cm: float) -> "LevelList":
        """The levels with energy strictly below ``limit_cm`` (cm^-1)."""
        keep = self.energy < limit_cm
        idx = np.flatnonzero(keep)
        return LevelList(
            self.ionization_energy,
            self.energy[keep],
            self.g[keep],
            tuple(self.j_text[i] for i in idx),
            tuple(self.energy_flags[i] for i in idx),
            tuple(self.j_kind[i] for i in idx),
            self.skipped,
        )


def read_level_file(path: str | Path) -> LevelList:
    """Read a level list in the ``J | E (cm^-1) |`` format described in the module docstring.

    Parameters
    ----------
    path
        File path.

    Returns
    -------
    LevelList
        All rows with a usable J and energy, in file order (including any
        above the ionization limit: use :meth:`LevelList.below` to cut).
    """
    text = Path(path).read_text(encoding="utf-8", errors="replace").splitlines()
    if not text:
        raise ValueError(f"empty level file {path}")
    try:
        ion = float(text[0].split()[0])
    except (ValueError, IndexError):
        ion = float("nan")
    energies: list[float] = []
    weights: list[float] = []
    jt: list[str] = []
    ef: list[frozenset] = []
    jk: list[str] = []
    skipped: list[tuple[int, str, str]] = []
    # rows of the current term block (blocks are separated by blank rows)
    block: list[tuple[int, str, float | None, str, float | None, frozenset]] = []

    def flush() -> None:
        known = [row[4] for row in block if row[4] is not None and row[2] is not None]
        for lineno, line, g, kind, e, flags in block:
            if g is None:
                skipped.append((lineno, line, f"J {kind}"))
                continue
            if e is None:
                if not known:
                    skipped.append((lineno, line, "no energy"))
                    continue
                e, flags = max(known), flags | {"estimated"}
            energies.append(e)
            weights.append(g)
            jt.append(line.split("|")[0].strip())
            ef.append(frozenset(flags))
            jk.append(kind)
        block.clear()

    for lineno, line in enumerate(text[1:], start=2):
        if line.strip().startswith("###"):
            break
        if "|" not in line:
            continue
        parts = line.split("|")
        j_raw, e_raw = parts[0].strip(), parts[1].strip()
        if set(j_raw) <= {"-"} and set(e_raw) <= {"-"}:
            flush()  # separator or blank row: end of a term block
            continue
        if j_raw == "J" or e_raw == "E":
            continue  # header row
        g, kind = statistical_weight(j_raw)
        e, flags = parse_level_energy(e_raw)
        if e is None and g is None:
            skipped.append((lineno, line.rstrip(), "no J and no energy"))
            continue
        block.append((lineno, line.rstrip(), g, kind, e, flags))
    flush()
    return LevelList(ion, np.asarray(energies, float), np.asarray(weights, float), tuple(jt), tuple(ef), tuple(jk), tuple(skipped))


# --------------------------------------------------------------------------- evaluation

def _temperature_array(T: Any) -> tuple[np.ndarray, bool]:
    """T (float, array or astropy Quantity) as float64 K array; flag scalar input."""
    if hasattr(T, "unit") and hasattr(T, "value"):
        import astropy.units as u

        T = u.Quantity(T).to_value(u.K, equivalencies=u.temperature())
    arr = np.asarray(T, dtype=float)
    bad = ~np.isfinite(arr) | (arr <= 0)
    if bad.any():
        first = np.unravel_index(np.flatnonzero(bad.ravel())[0], arr.shape) if arr.ndim else ()
        raise ValueError(
            f"temperature must be finite and > 0 K; bad value {arr[first]!r} at index {tuple(int(i) for i in first)}"
        )
    return arr, arr.ndim == 0


def _energy_cm(values: Any, name: str) -> np.ndarray:
    if hasattr(values, "unit") and hasattr(values, "value"):
        import astropy.units as u

        values = u.Quantity(values).to_value(u.cm**-1, equivalencies=u.spectral())
    arr = np.asarray(values, dtype=float)
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} must be finite")
    return arr


def partition_function_from_levels(
    energies_cm: Sequence[float] | np.ndarray,
    J_or_g: Sequence[float] | np.ndarray,
    T: Any,
    *,
    ionization_energy: Any = None,
    weights_are_g: bool = False,
) -> float | np.ndarray:
    """Partition function U(T) = sum g_i exp(-E_i / kT) of a level list.

    Parameters
    ----------
    energies_cm
        Level energies above the ground level in cm^-1 (or an astropy Quantity
        of energy, wavenumber or frequency).
    J_or_g
        Total angular momentum J of each level (g = 2J + 1), or the
        statistical weights themselves if ``weights_are_g`` is True.
    T
        Temperature(s) in K: float, array or astropy Quantity.
    ionization_energy
        Ionization limit in eV (float) or as a Quantity; levels at or above it
        are excluded.  None keeps every level.
    weights_are_g
        Interpret ``J_or_g`` as statistical weights.

    Returns
    -------
    float or ndarray
        U with the shape of ``T``.

    Examples
    --------
    >>> partition_function_from_levels([0.0, 100.0], [0, 1], 1e6)  # doctest: +ELLIPSIS
    3.99...
    """
    e = _energy_cm(energies_cm, "energies_cm").ravel()
    w = np.asarray(J_or_g, dtype=float).ravel()
    if e.shape != w.shape:
        raise ValueError(f"energies_cm and J_or_g differ in length: {e.size} vs {w.size}")
    g = w if weights_are_g else 2.0 * w + 1.0
    if np.any(~np.isfinite(g)) or np.any(g <= 0):
        raise ValueError("statistical weights must be finite and > 0 (J >= 0)")
    if ionization_energy is not None:
        if hasattr(ionization_energy, "unit"):
            limit = float(_energy_cm(ionization_energy, "ionization_energy"))
        else:
            limit = float(ionization_energy) * EV_TO_CM
        keep = e < limit
        e, g = e[keep], g[keep]
    t, scalar = _temperature_array(T)
    if e.size == 0:
        raise ValueError("no level below the ionization limit")
    e0 = e.min()
    # factor out the lowest level so that nothing underflows at low T
    x = np.multiply.outer(C2_CM_K / t.ravel(), e - e0)
    u = np.exp(-x) @ g
    if e0 != 0.0:
        u = u * np.exp(-C2_CM_K * e0 / t.ravel())
    u = u.reshape(t.shape)
    return float(u) if scalar else u


def hydrogen_partition_function(T: Any, n_max: int = H_N_MAX) -> float | np.ndarray:
    """Partition function of H I from its analytic level structure.

    U(T) = sum_{n=1}^{n_max} 2 n^2 exp(-chi_H (1 - 1/n^2) / kT), with
    chi_H = 13.598434599702 eV (NIST ASD, H I ionization energy) and the
    default cut-off ``n_max`` = :data:`H_N_MAX` (Inglis & Teller 1939 limit
    at n_e = 1e14 cm^-3).  Fine structure and the Lamb shift are ignored
    (they are < 1 cm^-1).

    Parameters
    ----------
    T
        Temperature(s) in K: float, array or astropy Quantity.
    n_max
        Highest principal quantum number included.
    """
    if int(n_max) < 1:
        raise ValueError(f"n_max must be >= 1, got {n_max}")
    n = np.arange(1, int(n_max) + 1, dtype=float)
    chi_cm = 13.598434599702 * EV_TO_CM
    return partition_function_from_levels(chi_cm * (1.0 - 1.0 / n**2), 2.0 * n**2, T, weights_are_g=True)
