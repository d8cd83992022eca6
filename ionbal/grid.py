"""Grids of states: specification, tiling, executors, progress and resumable runs.

A grid has two state axes, temperature and one more state variable (gas
pressure by default; or mass density, hydrogen density, electron pressure),
each log-spaced, linear or given as explicit values, and optionally two
composition axes, [M/H] and [alpha/M].  It is computed tile by tile: a tile is
a block of temperatures x state values at one composition, solved with one
call of :func:`ionbal.solve`.  Every point is solved on its own, so the
numbers do not depend on the tiling, the executor or the number of threads.

Runs are resumable.  Each finished tile is saved atomically as a small file in
a work directory beside the output, ``<output>.parts/``, together with the
grid specification (``spec.json``).  When all tiles are done the driver
streams them, one at a time, into the HDF5 file (:mod:`ionbal.io`), which is
written under a temporary name and renamed into place only when complete;
then the work directory is removed.  An interrupted run (Ctrl-C, ``kill -9``,
a lost machine) therefore leaves either nothing, the previous complete file,
or resumable parts: running the same grid again continues where it stopped
and gives bitwise the numbers of an uninterrupted run.

Executors: ``"serial"`` (the default: tiles one after another; the kernels
already use every core within a tile), ``"threads"`` (a pool of Python
threads; useful with few, large tiles) and ``"dask"`` (``dask.distributed``:
workers compute tiles, the driver alone writes files).

Example
-------
>>> from ionbal.grid import Axis, GridSpec, run_grid
>>> spec = GridSpec(Axis.log("temperature", 3000, 8000, 11),
...                 Axis.log("gas_pressure", 1e2, 1e6, 9))          # doctest: +SKIP
>>> summary = run_grid(spec, "small.h5")                              # doctest: +SKIP
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import hashlib
import json
import math
import os
import shutil
import sys
import time
import zipfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterable, Iterator, Mapping, Sequence

import numpy as np

from ._version import __version__
from .core import status as st
from .data.mixture import Mixture
from .data.species import Species, parse_species

__all__ = [
    "Axis",
    "GridSpec",
    "Tile",
    "TileTask",
    "GridRun",
    "GridMismatchError",
    "GridBusyError",
    "STATE_AXES",
    "AXIS_UNITS",
    "AXIS_LONG_NAMES",
    "DEFAULT_OUTPUT",
    "default_spec",
    "default_species",
    "resolve_species",
    "compute_tile",
    "run_grid",
    "Progress",
]

#: the state variables a grid axis can be (besides temperature), in order of preference
STATE_AXES: tuple[str, ...] = ("gas_pressure", "mass_density", "hydrogen_density", "electron_pressure")
#: CF-style unit strings of the axes and stored quantities (cgs)
AXIS_UNITS: dict[str, str] = {
    "temperature": "K",
    "gas_pressure": "dyn cm-2",
    "mass_density": "g cm-3",
    "hydrogen_density": "cm-3",
    "electron_pressure": "dyn cm-2",
    "metallicity": "1",
    "alpha": "1",
}
AXIS_LONG_NAMES: dict[str, str] = {
    "temperature": "temperature",
    "gas_pressure": "gas pressure",
    "mass_density": "mass density",
    "hydrogen_density": "number density of hydrogen nuclei (all stages)",
    "electron_pressure": "electron pressure",
    "metallicity": "[M/H], shift of log abundance of every element heavier than He",
    "alpha": "[alpha/M], extra shift of log abundance of O, Ne, Mg, Si, S, Ar, Ca, Ti",
}
#: default axes of ``ionbal grid`` (log-spaced)
DEFAULT_TEMPERATURE_AXIS = "2000:50000:301"
DEFAULT_STATE_AXIS = "1e-4:1e8:241"
#: plain name of the default output file (in the current directory)
DEFAULT_OUTPUT = "ionbal-grid.h5"
#: default number of points per tile (a 64 x 64 block)
DEFAULT_TILE_SIZE = 4096
#: HDF5 chunks are at most this many points along each state axis (tiles are multiples of it)
CHUNK_SIDE = 64
#: largest grid accepted (points); far beyond any sensible use, it catches typos
MAX_POINTS = 2**33
#: per-point quantities of a tile besides the state axes
POINT_QUANTITIES: tuple[str, ...] = (
    "electron_density",
    "electron_pressure",
    "gas_pressure",
    "mass_density",
    "hydrogen_density",
    "nuclei_density",
    "mean_molecular_weight",
)

_SPACINGS = ("log", "linear", "explicit")
_SPEC_FILE = "spec.json"
_LOCK_FILE = "lock"


class GridMismatchError(ValueError):
    """The work directory of an output holds parts of a different grid."""


class GridBusyError(OSError):
    """Another process is computing the same output."""


# ---------------------------------------------------------------------------------------------------
# axes and the grid specification
# ---------------------------------------------------------------------------------------------------

def _finite_float(value, what: str) -> float:
    if isinstance(value, bool):
        raise ValueError(f"{what} must be a number, got {value!r}")
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{what} must be a number, got {value!r}") from None
    if not math.isfinite(v):
        raise ValueError(f"{what} must be finite, got {value!r}")
    return v


def _unit_of(name: str) -> str:
    return AXIS_UNITS.get(name, "")


@dataclass(frozen=True)
class Axis:
    """One axis of a grid: a name and strictly increasing values.

    Build one with :meth:`log`, :meth:`linear`, :meth:`explicit` or
    :meth:`parse`.  State axes (temperature and the state variable) need
    positive values in cgs units (K, dyn cm^-2, g cm^-3, cm^-3); composition
    axes ([M/H], [alpha/M]) are in dex.

    Attributes
    ----------
    name : str
        ``"temperature"``, a state variable, ``"metallicity"`` or ``"alpha"``.
    values : tuple of float
        The axis values, strictly increasing.
    spacing : str
        ``"log"``, ``"linear"`` or ``"explicit"`` (how the values were made).
    """

    name: str
    values: tuple
    spacing: str = "explicit"

    def __post_init__(self) -> None:
        known = ("temperature",) + STATE_AXES + ("metallicity", "alpha")
        if self.name not in known:
            raise ValueError(f"unknown axis {self.name!r}; axes are {', '.join(known)}")
        if self.spacing not in _SPACINGS:
            raise ValueError(f"axis spacing must be one of {', '.join(_SPACINGS)}, got {self.spacing!r}")
        vals = tuple(_finite_float(v, f"{self.name} axis value") for v in self.values)
        if not vals:
            raise ValueError(f"the {self.name} axis has no values")
        if len(vals) > 10_000_000:
            raise ValueError(f"the {self.name} axis has {len(vals)} values; at most 10,000,000 are accepted")
        if self.is_state:
            for i, v in enumerate(vals):
                if not v > 0:
                    raise ValueError(f"{self.name} axis value {v:g} at position {i} must be positive "
                                     f"[{_unit_of(self.name)}]")
        else:
            for i, v in enumerate(vals):
                if abs(v) > 10:
                    raise ValueError(f"{self.name} axis value {v:g} at position {i} is not a plausible shift "
                                     "in dex (|value| <= 10)")
        for i in range(1, len(vals)):
            if not vals[i] > vals[i - 1]:
                raise ValueError(f"{self.name} axis values must be strictly increasing; {vals[i]:g} at "
                                 f"position {i} follows {vals[i - 1]:g}")
        object.__setattr__(self, "values", vals)

    # -- constructors -------------------------------------------------------------------------------
    @classmethod
    def log(cls, name: str, start: float, stop: float, num: int) -> "Axis":
        """``num`` values spaced evenly in log from ``start`` to ``stop`` (both included)."""
        start, stop, num = cls._range_args(name, start, stop, num)
        if start <= 0 or stop <= 0:
            raise ValueError(f"a log-spaced {name} axis needs positive ends, got {start:g} and {stop:g}")
        vals = np.geomspace(start, stop, num) if num > 1 else np.array([start])
        return cls(name, tuple(float(v) for v in vals), "log")

    @classmethod
    def linear(cls, name: str, start: float, stop: float, num: int) -> "Axis":
        """``num`` evenly spaced values from ``start`` to ``stop`` (both included)."""
        start, stop, num = cls._range_args(name, start, stop, num)
        vals = np.linspace(start, stop, num) if num > 1 else np.array([start])
        return cls(name, tuple(float(v) for v in vals), "linear")

    @classmethod
    def explicit(cls, name: str, values: Iterable[float]) -> "Axis":
        """An axis with the given values (strictly increasing)."""
        if isinstance(values, (str, bytes)):
            raise ValueError(f"{name} axis values must be numbers, got the string {values!r}")
        try:
            vals = [float(np.asarray(v, dtype=float)) for v in np.ravel(np.asarray(values, dtype=object))]
        except (TypeError, ValueError):
            raise ValueError(f"{name} axis values must be numbers, got {values!r}") from None
        return cls(name, tuple(vals), "explicit")

    @staticmethod
    def _range_args(name, start, stop, num):
        start = _finite_float(start, f"{name} axis start")
        stop = _finite_float(stop, f"{name} axis stop")
        if isinstance(num, bool) or not isinstance(num, (int, np.integer)):
            raise ValueError(f"the number of {name} values must be an integer, got {num!r}")
        num = int(num)
        if num < 1:
            raise ValueError(f"the number of {name} values must be at least 1, got {num}")
        if num > 1 and not stop > start:
            raise ValueError(f"the {name} axis must increase: start {start:g} is not below stop {stop:g}")
        return start, stop, num

    @classmethod
    def parse(cls, name: str, text: str) -> "Axis":
        """Parse an axis from text.

        Forms: ``START:STOP:NUM`` (log-spaced for state axes, linear for
        composition axes), ``START:STOP:NUM:log`` or ``START:STOP:NUM:linear``,
        or explicit values ``V1,V2,...`` (one value is allowed).

        Examples
        --------
        >>> Axis.parse("temperature", "3000:9000:4:linear").values
        (3000.0, 5000.0, 7000.0, 9000.0)
        >>> Axis.parse("metallicity", "-2,-1,0").values
        (-2.0, -1.0, 0.0)
        """
        if not isinstance(text, str) or not text.strip():
            raise ValueError(f"empty {name} axis; give START:STOP:NUM[:log|linear] or V1,V2,...")
        s = text.strip()
        if ":" in s:
            parts = [p.strip() for p in s.split(":")]
            if len(parts) not in (3, 4):
                raise ValueError(f"cannot read {name} axis {text!r}; give START:STOP:NUM[:log|linear] "
                                 "or V1,V2,...")
            try:
                start, stop = float(parts[0]), float(parts[1])
            except ValueError:
                raise ValueError(f"cannot read {name} axis {text!r}: start and stop must be numbers") from None
            try:
                num = int(parts[2])
            except ValueError:
                raise ValueError(f"cannot read {name} axis {text!r}: the number of values {parts[2]!r} is not "
                                 "a whole number") from None
            is_state = name == "temperature" or name in STATE_AXES
            spacing = parts[3].lower() if len(parts) == 4 else ("log" if is_state else "linear")
            if spacing in ("log", "geom", "logarithmic"):
                return cls.log(name, start, stop, num)
            if spacing in ("lin", "linear"):
                return cls.linear(name, start, stop, num)
            raise ValueError(f"cannot read {name} axis {text!r}: spacing must be 'log' or 'linear', "
                             f"got {parts[3]!r}")
        vals = []
        for item in s.split(","):
            item = item.strip()
            if not item:
                raise ValueError(f"cannot read {name} axis {text!r}: empty value in the list")
            try:
                vals.append(float(item))
            except ValueError:
                raise ValueError(f"cannot read {name} axis {text!r}: {item!r} is not a number") from None
        return cls.explicit(name, vals)

    # -- properties ---------------------------------------------------------------------------------
    @property
    def is_state(self) -> bool:
        return self.name == "temperature" or self.name in STATE_AXES

    @property
    def array(self) -> np.ndarray:
        """The values as a float64 array."""
        return np.array(self.values, dtype=np.float64)

    @property
    def unit(self) -> str:
        """CF unit string (cgs)."""
        return _unit_of(self.name)

    def __len__(self) -> int:
        return len(self.values)

    def describe(self) -> str:
        """One line, e.g. ``temperature 2000-50000 K (301 values, log)``."""
        v = self.values
        unit = "" if self.unit in ("", "1") else f" {self.unit}"
        rng = f"{v[0]:g}" if len(v) == 1 else f"{v[0]:g}-{v[-1]:g}"
        return f"{self.name} {rng}{unit} ({len(v)} value{'s' if len(v) != 1 else ''}, {self.spacing})"

    def to_dict(self) -> dict:
        return {"name": self.name, "spacing": self.spacing, "values": list(self.values)}

    @classmethod
    def from_dict(cls, d: Mapping) -> "Axis":
        return cls(d["name"], tuple(d["values"]), d.get("spacing", "explicit"))


def default_species(mixture: Mixture) -> tuple[str, ...]:
    """The default species of a grid: stages I-III of every element of the mixture, plus H-.

    Stages beyond what an element has are left out (H has H I and H II; He
    has He I-III).  Ordered by element (Z), H- before H I.
    """
    out = []
    for z in mixture.atomic_numbers:
        z = int(z)
        if z == 1:
            out.append(Species(1, -1))
        for q in range(0, min(z, 2) + 1):
            out.append(Species(z, q))
    return tuple(str(s) for s in out)


def all_species(mixture: Mixture) -> tuple[str, ...]:
    """Every ionization stage of every element of the mixture (neutral to bare nucleus), plus H-."""
    out = []
    for z in mixture.atomic_numbers:
        z = int(z)
        if z == 1:
            out.append(Species(1, -1))
        out.extend(Species(z, q) for q in range(0, z + 1))
    return tuple(str(s) for s in out)


def resolve_species(mixture: Mixture, species) -> tuple[str, ...]:
    """Turn ``"default"``, ``"all"`` or a list of names into canonical names, ordered by (Z, charge).

    Raises
    ------
    ValueError
        For an unreadable name, an element not in the mixture, or a repeated species.
    """
    if species is None or (isinstance(species, str) and species.strip().lower() == "default"):
        return default_species(mixture)
    if isinstance(species, str) and species.strip().lower() == "all":
        return all_species(mixture)
    if isinstance(species, str):
        species = [s for s in species.split(",")]
    parsed = []
    seen = set()
    for item in species:
        if isinstance(item, str) and not item.strip():
            raise ValueError("empty species name in the species list")
        sp = parse_species(item.strip() if isinstance(item, str) else item)
        if sp.element not in mixture.elements:
            raise ValueError(f"species {sp} is not in the mixture: it has no {sp.element}")
        if sp in seen:
            raise ValueError(f"species {sp} is listed more than once")
        seen.add(sp)
        parsed.append(sp)
    if not parsed:
        raise ValueError("the species list is empty")
    return tuple(str(s) for s in sorted(parsed))


def _table_temperature_range() -> tuple[float, float]:
    from .data.tables import partition_grid

    g = partition_grid()
    return g.T_min, g.T_max


def _tile_shape(n_t: int, n_s: int, tile_size: int) -> tuple[int, int]:
    """Tile shape (rows of T, columns of the state axis) for about ``tile_size`` points.

    Tiles at least ``CHUNK_SIDE`` wide are multiples of it, so that the HDF5
    chunks (at most ``CHUNK_SIDE`` along each axis) never straddle two tiles.
    """
    side = max(1, math.isqrt(tile_size))
    if side >= CHUNK_SIDE:
        side = CHUNK_SIDE * (side // CHUNK_SIDE)
    ts = min(n_s, side)
    tt = max(1, tile_size // ts)
    if tt >= CHUNK_SIDE:
        tt = CHUNK_SIDE * (tt // CHUNK_SIDE)
    tt = min(n_t, tt)
    return tt, ts


@dataclass(frozen=True)
class Tile:
    """One tile: composition indices and a block of the state axes."""

    index: int
    composition: tuple  # (i_metallicity, i_alpha), () without composition axes
    t0: int
    t1: int
    s0: int
    s1: int

    @property
    def shape(self) -> tuple[int, int]:
        return (self.t1 - self.t0, self.s1 - self.s0)

    @property
    def size(self) -> int:
        return (self.t1 - self.t0) * (self.s1 - self.s0)


@dataclass(frozen=True)
class TileTask:
    """Everything a worker needs to compute one tile (picklable; sent to Dask workers)."""

    tile: Tile
    temperature: np.ndarray
    state_variable: str
    state: np.ndarray
    mixture: Mixture
    species: tuple
    number_densities: bool
    dtype: str
    tol: float
    max_iterations: int
    validity: bool = True
    numba_threads: int | None = None


@dataclass(frozen=True)
class GridSpec:
    """What to compute: axes, mixture(s), species and storage options.

    Parameters
    ----------
    temperature : Axis
        Temperature axis [K]; must lie inside the partition-function tables.
    state : Axis
        The second state axis: gas_pressure, mass_density, hydrogen_density or
        electron_pressure (cgs).
    mixture : Mixture, optional
        The mixture (default AGSS09).  With composition axes it is the base
        that is scaled to each ([M/H], [alpha/M]).
    metallicity, alpha : sequence of float or Axis, optional
        Composition axes in dex.  Giving either makes the grid four-dimensional
        (metallicity, alpha, temperature, state); a missing one is ``(0.0,)``.
    overrides : mapping, optional
        A(X) values applied after the scaling at every composition (only with
        composition axes; without them, put the overrides in ``mixture``).
    species : "default", "all" or sequence of names
        Species of the ion-fraction cube: by default stages I-III of every
        element plus H- (:func:`default_species`).
    number_densities : bool
        Also store the number density of every species.
    float32 : bool
        Store the ion-fraction and number-density cubes in single precision
        (fractions below about 1e-45 then become 0).
    tile_size : int
        Points per tile (about; tiles are blocks of the state axes).
    validity : bool
        Store the per-point validity flags of :mod:`ionbal.validity` (costs
        about as much time as the solve itself).
    tol, max_iterations
        Passed to :func:`ionbal.solve`.
    """

    temperature: Axis
    state: Axis
    mixture: Mixture | None = None
    metallicity: tuple | None = None
    alpha: tuple | None = None
    overrides: tuple = ()
    species: tuple | str = "default"
    number_densities: bool = False
    float32: bool = False
    tile_size: int = DEFAULT_TILE_SIZE
    tol: float = 1e-13
    max_iterations: int = 200
    validity: bool = True

    def __post_init__(self) -> None:
        from .api import default_mixture

        if not isinstance(self.temperature, Axis) or self.temperature.name != "temperature":
            raise ValueError("GridSpec.temperature must be an Axis named 'temperature'")
        if not isinstance(self.state, Axis) or self.state.name not in STATE_AXES:
            raise ValueError(f"GridSpec.state must be an Axis named one of {', '.join(STATE_AXES)}")
        mix = default_mixture() if self.mixture is None else self.mixture
        if not isinstance(mix, Mixture):
            raise TypeError(f"mixture must be an ionbal.Mixture, got {type(mix).__name__}")
        object.__setattr__(self, "mixture", mix)

        def comp(value, name):
            if value is None:
                return None
            ax = value if isinstance(value, Axis) else Axis.explicit(name, value)
            if ax.name != name:
                raise ValueError(f"the {name} axis was given an Axis named {ax.name!r}")
            return ax.values

        m, a = comp(self.metallicity, "metallicity"), comp(self.alpha, "alpha")
        if (m is None) != (a is None):
            m, a = m or (0.0,), a or (0.0,)
        object.__setattr__(self, "metallicity", m)
        object.__setattr__(self, "alpha", a)
        ov = dict(self.overrides.items() if isinstance(self.overrides, Mapping) else self.overrides)
        if ov and m is None:
            raise ValueError("abundance overrides are only used with composition axes; without them apply "
                             "them to the mixture (Mixture.with_abundances)")
        object.__setattr__(self, "overrides", tuple(sorted((str(k), float(v)) for k, v in ov.items())))
        # check every composition mixture can be built (clear error for out-of-range abundances)
        for im in range(len(m or (0,))):
            for ia in range(len(a or (0,))):
                self.mixture_at((im, ia) if m is not None else ())
        object.__setattr__(self, "species", resolve_species(mix, self.species))
        for name in ("number_densities", "float32", "validity"):
            object.__setattr__(self, name, bool(getattr(self, name)))
        ts = self.tile_size
        if isinstance(ts, bool) or not isinstance(ts, (int, np.integer)) or ts < 1:
            raise ValueError(f"tile_size must be a positive integer (points per tile), got {ts!r}")
        if ts > 50_000_000:
            raise ValueError(f"tile_size {ts} is too large (at most 50,000,000 points per tile)")
        object.__setattr__(self, "tile_size", int(ts))
        if not (isinstance(self.tol, (int, float)) and 0 < self.tol < 1e-3):
            raise ValueError(f"tol must be a number in (0, 1e-3), got {self.tol!r}")
        if isinstance(self.max_iterations, bool) or not isinstance(self.max_iterations, (int, np.integer)) \
                or not 1 <= self.max_iterations <= 100_000:
            raise ValueError(f"max_iterations must be an integer in 1..100000, got {self.max_iterations!r}")
        t_lo, t_hi = _table_temperature_range()
        tv = self.temperature.values
        for i, t in enumerate(tv):
            if t < t_lo * (1 - 1e-12) or t > t_hi * (1 + 1e-12):
                raise ValueError(f"temperature axis value {t:g} K at position {i} is outside the "
                                 f"partition-function tables ({t_lo:.4g}-{t_hi:.4g} K)")
        if self.n_points > MAX_POINTS:
            raise ValueError(f"the grid has {self.n_points:,} points; at most {MAX_POINTS:,} are accepted")

    # -- shape and dims -----------------------------------------------------------------------------
    @property
    def has_composition(self) -> bool:
        return self.metallicity is not None

    @property
    def state_variable(self) -> str:
        return self.state.name

    @property
    def dims(self) -> tuple[str, ...]:
        """Dimension names of the per-point arrays."""
        comp = ("metallicity", "alpha") if self.has_composition else ()
        return comp + ("temperature", self.state.name)

    @property
    def shape(self) -> tuple[int, ...]:
        comp = (len(self.metallicity), len(self.alpha)) if self.has_composition else ()
        return comp + (len(self.temperature), len(self.state))

    @property
    def n_points(self) -> int:
        return int(np.prod(self.shape, dtype=np.int64))

    @property
    def tile_shape(self) -> tuple[int, int]:
        return _tile_shape(len(self.temperature), len(self.state), self.tile_size)

    @property
    def chunk_shape(self) -> tuple[int, int]:
        """HDF5 chunk shape along (temperature, state); divides the tile shape."""
        tt, ts = self.tile_shape
        return min(tt, CHUNK_SIDE), min(ts, CHUNK_SIDE)

    @property
    def cube_dtype(self) -> str:
        return "float32" if self.float32 else "float64"

    def compositions(self) -> list[tuple]:
        if not self.has_composition:
            return [()]
        return [(im, ia) for im in range(len(self.metallicity)) for ia in range(len(self.alpha))]

    def tiles(self) -> list[Tile]:
        """All tiles, in a fixed order (composition, then temperature blocks, then state blocks)."""
        tt, ts = self.tile_shape
        nt, ns = len(self.temperature), len(self.state)
        out = []
        for c in self.compositions():
            for t0 in range(0, nt, tt):
                for s0 in range(0, ns, ts):
                    out.append(Tile(len(out), c, t0, min(nt, t0 + tt), s0, min(ns, s0 + ts)))
        return out

    def mixture_at(self, composition: tuple) -> Mixture:
        """The mixture of one composition index ``(i_metallicity, i_alpha)`` (``()`` without axes)."""
        if not composition:
            return self.mixture
        im, ia = composition
        mix = self.mixture.scaled(metallicity=self.metallicity[im], alpha=self.alpha[ia])
        if self.overrides:
            name = mix.name
            mix = mix.with_abundances(dict(self.overrides))
            mix = Mixture(dict(zip(mix.elements, mix.log_eps)), name=f"{name} (modified)")
        return mix

    def task(self, tile: Tile, numba_threads: int | None = None) -> TileTask:
        return TileTask(
            tile=tile,
            temperature=self.temperature.array[tile.t0:tile.t1],
            state_variable=self.state.name,
            state=self.state.array[tile.s0:tile.s1],
            mixture=self.mixture_at(tile.composition),
            species=self.species,
            number_densities=self.number_densities,
            dtype=self.cube_dtype,
            tol=self.tol,
            max_iterations=self.max_iterations,
            validity=self.validity,
            numba_threads=numba_threads,
        )

    # -- serialisation ------------------------------------------------------------------------------
    def to_dict(self) -> dict:
        """A JSON-able description (floats round-trip exactly)."""
        mix = self.mixture
        return {
            "format": "ionbal grid spec 1",
            "temperature": self.temperature.to_dict(),
            "state": self.state.to_dict(),
            "mixture": {"name": mix.name, "abundances": {el: float(a) for el, a in zip(mix.elements, mix.log_eps)}},
            "metallicity": None if self.metallicity is None else list(self.metallicity),
            "alpha": None if self.alpha is None else list(self.alpha),
            "overrides": [list(t) for t in self.overrides],
            "species": list(self.species),
            "number_densities": self.number_densities,
            "float32": self.float32,
            "tile_size": self.tile_size,
            "tol": self.tol,
            "max_iterations": self.max_iterations,
            "validity": self.validity,
        }

    @classmethod
    def from_dict(cls, d: Mapping) -> "GridSpec":
        mix = Mixture(d["mixture"]["abundances"], name=d["mixture"].get("name", "custom"))
        return cls(
            temperature=Axis.from_dict(d["temperature"]),
            state=Axis.from_dict(d["state"]),
            mixture=mix,
            metallicity=None if d.get("metallicity") is None else tuple(d["metallicity"]),
            alpha=None if d.get("alpha") is None else tuple(d["alpha"]),
            overrides=tuple(tuple(t) for t in d.get("overrides", ())),
            species=tuple(d["species"]),
            number_densities=d.get("number_densities", False),
            float32=d.get("float32", False),
            tile_size=d.get("tile_size", DEFAULT_TILE_SIZE),
            tol=d.get("tol", 1e-13),
            max_iterations=d.get("max_iterations", 200),
            validity=d.get("validity", True),
        )

    def fingerprint(self) -> dict:
        """What must match for stored tiles to be reused: the spec, ionbal's version, the data tables."""
        from .io import data_sources

        return {
            "spec": self.to_dict(),
            "ionbal_version": __version__,
            "tables": {name: info.get("sha256", "") for name, info in data_sources().items()},
        }

    def digest(self) -> str:
        """SHA-256 of :meth:`fingerprint` (canonical JSON)."""
        text = json.dumps(self.fingerprint(), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(text.encode()).hexdigest()

    def describe(self) -> list[str]:
        lines = [f"axes        {self.temperature.describe()}", f"            x {self.state.describe()}"]
        if self.has_composition:
            lines.append(f"            x [M/H] {', '.join(f'{v:+g}' for v in self.metallicity)}"
                         f" x [alpha/M] {', '.join(f'{v:+g}' for v in self.alpha)}")
        lines.append(f"mixture     {self.mixture.name} ({len(self.mixture)} elements)")
        return lines


def default_spec(**changes) -> GridSpec:
    """The default grid of ``ionbal grid``.

    AGSS09; T 2,000-50,000 K (301 values, log) x P_gas 1e-4-1e8 dyn cm^-2 (241 values, log).
    """
    kw = dict(temperature=Axis.parse("temperature", DEFAULT_TEMPERATURE_AXIS),
              state=Axis.parse("gas_pressure", DEFAULT_STATE_AXIS))
    kw.update(changes)
    return GridSpec(**kw)


# ---------------------------------------------------------------------------------------------------
# computing one tile (runs on workers)
# ---------------------------------------------------------------------------------------------------

def compute_tile(task: TileTask) -> dict[str, np.ndarray]:
    """Solve one tile; returns the arrays to store, each of the tile's shape (cubes: species first).

    Keys: the :data:`POINT_QUANTITIES` except the state variable, ``status``
    (int8), ``iterations`` (int32), ``validity`` (uint8 bitmask of
    :mod:`ionbal.validity`), ``ion_fraction`` (n_species, *shape) and, if
    requested, ``number_density``.  Deterministic: the same task gives the
    same bits on any worker of the same installation.
    """
    from .api import solve

    if task.numba_threads:
        from .core.config import set_num_threads

        with contextlib.suppress(Exception):
            set_num_threads(max(1, min(int(task.numba_threads), _max_numba_threads())))
    T = np.asarray(task.temperature, dtype=np.float64)[:, None]
    S = np.asarray(task.state, dtype=np.float64)[None, :]
    r = solve(T, mixture=task.mixture, errors="mask", tol=task.tol, max_iterations=task.max_iterations,
              **{task.state_variable: S})
    shape = (T.shape[0], S.shape[1])
    out: dict[str, np.ndarray] = {}
    for name in POINT_QUANTITIES:
        if name != task.state_variable:
            out[name] = np.ascontiguousarray(np.broadcast_to(getattr(r, name), shape), dtype=np.float64)
    out["status"] = np.ascontiguousarray(np.broadcast_to(r.status, shape), dtype=np.int8)
    out["iterations"] = np.ascontiguousarray(np.broadcast_to(r.iterations, shape), dtype=np.int32)
    dtype = np.dtype(task.dtype)
    frac = species_fractions(r, task.species).reshape((len(task.species),) + shape)
    out["ion_fraction"] = frac.astype(dtype, copy=False) if frac.dtype != dtype else frac
    if task.number_densities:
        nuclei = np.broadcast_to(r.nuclei_density, shape)
        weights = dict(zip(task.mixture.elements, task.mixture.number_fractions))
        dens = np.empty((len(task.species),) + shape, dtype=dtype)
        with np.errstate(under="ignore", over="ignore", invalid="ignore"):
            for k, name in enumerate(task.species):
                dens[k] = frac[k] * nuclei * weights[parse_species(name).element]
        out["number_density"] = dens
    if task.validity:
        out["validity"] = _validity_mask(r, shape)
    return out


def _validity_mask(result, shape) -> np.ndarray:
    """Per-point validity bitmask (:func:`ionbal.validity.bitmask`), 0 where unavailable."""
    try:
        from .validity import bitmask
    except ImportError:  # pragma: no cover - older layouts
        return np.zeros(shape, dtype=np.uint8)
    return np.ascontiguousarray(np.broadcast_to(bitmask(result.validity), shape), dtype=np.uint8)


def species_fractions(result, species: Sequence[str]) -> np.ndarray:
    """Ion fractions of the given species at every point of a result, shape ``(n_species, n_points)``."""
    return result.species_fractions(species).reshape(len(species), -1)


# ---------------------------------------------------------------------------------------------------
# progress bar
# ---------------------------------------------------------------------------------------------------

def _fmt_duration(seconds: float) -> str:
    if not math.isfinite(seconds) or seconds < 0:
        return "--:--"
    s = int(round(seconds))
    h, rem = divmod(s, 3600)
    m, s = divmod(rem, 60)
    return f"{h:d}:{m:02d}:{s:02d}" if h else f"{m:02d}:{s:02d}"


class Progress:
    """A one-line progress bar on a terminal: done/total points, points/s, time left.

    It draws only when ``enabled`` (default: the stream is a terminal), and at
    most every ``interval`` seconds.  Points finished in an earlier run
    (``skipped``) count as done but not into the rate.
    """

    def __init__(self, total: int, *, stream=None, enabled: bool | None = None, interval: float = 0.2,
                 label: str = "ionbal grid", width: int = 28):
        self.stream = sys.stderr if stream is None else stream
        if enabled is None:
            try:
                enabled = bool(self.stream.isatty())
            except (AttributeError, ValueError):
                enabled = False
        self.enabled = enabled
        self.total = max(0, int(total))
        self.done = 0
        self.skipped = 0
        self.interval = interval
        self.label = label
        self.width = width
        self._t0 = time.monotonic()
        self._last = 0.0
        self._drawn = False

    def skip(self, n: int) -> None:
        """Count ``n`` points as already done (resumed)."""
        self.skipped += int(n)
        self.done += int(n)

    def update(self, n: int) -> None:
        self.done += int(n)
        now = time.monotonic()
        if self.enabled and (now - self._last >= self.interval or self.done >= self.total):
            self._last = now
            self._draw(now)

    def rate(self) -> float:
        dt = time.monotonic() - self._t0
        computed = self.done - self.skipped
        return computed / dt if dt > 0 and computed > 0 else float("nan")

    def line(self, now: float | None = None) -> str:
        frac = self.done / self.total if self.total else 1.0
        full = int(round(frac * self.width))
        bar = "#" * full + "-" * (self.width - full)
        rate = self.rate()
        left = (self.total - self.done) / rate if rate == rate and rate > 0 else float("nan")
        rate_s = f"{rate:,.0f} pts/s" if rate == rate else "-- pts/s"
        return (f"{self.label} [{bar}] {100 * frac:5.1f}% {self.done:,}/{self.total:,} pts  "
                f"{rate_s}  left {_fmt_duration(left)}")

    def _draw(self, now: float) -> None:
        try:
            self.stream.write("\r" + self.line(now) + "\x1b[K")
            self.stream.flush()
            self._drawn = True
        except (OSError, ValueError):
            self.enabled = False

    def close(self) -> None:
        if self.enabled and self._drawn:
            with contextlib.suppress(OSError, ValueError):
                if self.done < self.total:
                    self._draw(time.monotonic())
                self.stream.write("\n")
                self.stream.flush()


# ---------------------------------------------------------------------------------------------------
# the work directory: spec, lock, tiles
# ---------------------------------------------------------------------------------------------------

def parts_dir_for(output: str | os.PathLike) -> Path:
    """The work directory of an output: ``<output>.parts`` beside it."""
    p = Path(output)
    return p.with_name(p.name + ".parts")


def _fsync_dir(path: Path) -> None:
    with contextlib.suppress(OSError, AttributeError):
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _atomic_write_bytes(path: Path, write: Callable) -> None:
    """Write via ``write(fileobj)`` so that ``path`` appears only when complete (see :func:`io.atomic_output`)."""
    from .io import atomic_output

    with atomic_output(path) as tmp:
        with open(tmp, "wb") as fh:
            write(fh)


class WorkDir:
    """The ``<output>.parts`` directory of a run: a lock, ``spec.json`` and one file per finished tile."""

    def __init__(self, path: Path, spec: GridSpec):
        self.path = path
        self.spec = spec
        self.digest = spec.digest()
        self._lock_fh = None

    # -- lifecycle ----------------------------------------------------------------------------------
    def open(self, *, discard: bool = False) -> int:
        """Create or reuse the directory; returns the number of finished tiles found.

        Raises :class:`GridMismatchError` if it holds another grid's parts
        (unless ``discard``), :class:`GridBusyError` if another process holds the lock.
        """
        if self.path.exists() and not self.path.is_dir():
            raise FileExistsError(f"{self.path} exists and is not a directory; it is in the way of the "
                                  "work directory of this grid")
        self.path.mkdir(exist_ok=True)
        self._lock()
        spec_file = self.path / _SPEC_FILE
        if spec_file.exists():
            try:
                stored = json.loads(spec_file.read_text())
                same = stored.get("digest") == self.digest
            except (OSError, ValueError, AttributeError):
                stored, same = None, False
            if not same:
                if not discard:
                    what = _describe_mismatch(stored, self.spec) if stored else "its spec.json is unreadable"
                    self.close()
                    raise GridMismatchError(
                        f"{self.path} holds the parts of a different grid ({what}); finish that run, remove "
                        "the directory, or start over with --discard-parts")
                self._clear()
        else:
            # no spec.json: a run killed before writing it leaves at most the lock and hidden
            # temporary files; anything else means the directory is not ours
            foreign = [p.name for p in self.path.iterdir()
                       if p.name != _LOCK_FILE and not (p.name.startswith(".") and ".tmp-" in p.name)]
            if foreign:
                self.close()
                raise FileExistsError(f"{self.path} exists but is not an ionbal work directory (it holds "
                                      f"{', '.join(sorted(foreign)[:3])}{', ...' if len(foreign) > 3 else ''}); "
                                      "move it away")
            self._clear()
        if not spec_file.exists():
            payload = {"digest": self.digest, **self.spec.fingerprint()}
            text = json.dumps(payload, sort_keys=True, indent=1).encode()
            _atomic_write_bytes(spec_file, lambda fh: fh.write(text))
            _fsync_dir(self.path)
        return len(self.finished())

    def _lock(self) -> None:
        try:
            import fcntl
        except ImportError:  # pragma: no cover - not POSIX
            return
        fh = open(self.path / _LOCK_FILE, "a+b")
        try:
            fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            fh.close()
            raise GridBusyError(f"another ionbal process is computing this grid (lock held on "
                                f"{self.path / _LOCK_FILE}); wait for it or stop it") from None
        self._lock_fh = fh

    def close(self) -> None:
        if self._lock_fh is not None:
            with contextlib.suppress(OSError):
                self._lock_fh.close()
            self._lock_fh = None

    def _clear(self) -> None:
        for p in self.path.iterdir():
            if p.name == _LOCK_FILE:
                continue
            if p.is_dir() and not p.is_symlink():
                shutil.rmtree(p, ignore_errors=True)
            else:
                with contextlib.suppress(OSError):
                    p.unlink()

    def remove(self) -> None:
        """Remove the directory: rename it away atomically first, then delete it."""
        self.close()
        trash = self.path.with_name(f".{self.path.name}.removing-{os.getpid()}")
        try:
            os.replace(self.path, trash)
        except OSError:
            trash = self.path
        shutil.rmtree(trash, ignore_errors=True)

    # -- tiles ---------------------------------------------------------------------------------------
    def tile_path(self, index: int) -> Path:
        return self.path / f"tile-{index:07d}.npz"

    def finished(self) -> set[int]:
        done = set()
        for p in self.path.glob("tile-*.npz"):
            with contextlib.suppress(ValueError):
                done.add(int(p.stem.split("-")[1]))
        return done

    def save(self, tile: Tile, arrays: Mapping[str, np.ndarray]) -> None:
        meta = np.frombuffer(json.dumps({"digest": self.digest, "index": tile.index}).encode(), dtype=np.uint8)

        def write(fh):
            np.savez(fh, _meta=meta, **arrays)

        _atomic_write_bytes(self.tile_path(tile.index), write)

    def load(self, tile: Tile) -> dict[str, np.ndarray] | None:
        """The stored arrays of a tile, or None if missing or damaged (then it is recomputed)."""
        path = self.tile_path(tile.index)
        try:
            with np.load(path, allow_pickle=False) as z:
                data = {k: z[k] for k in z.files}
        except FileNotFoundError:
            return None
        except (OSError, ValueError, EOFError, KeyError, zipfile.BadZipFile) as exc:  # damaged part
            _warn(f"tile file {path.name} is damaged ({exc.__class__.__name__}); it will be recomputed")
            with contextlib.suppress(OSError):
                path.unlink()
            return None
        try:
            meta = json.loads(bytes(data.pop("_meta")).decode())
            ok = meta.get("digest") == self.digest and meta.get("index") == tile.index
            ok = ok and all(v.shape[-2:] == tile.shape for v in data.values())
        except (KeyError, ValueError, AttributeError):
            ok = False
        if not ok:
            _warn(f"tile file {path.name} does not match this grid; it will be recomputed")
            with contextlib.suppress(OSError):
                path.unlink()
            return None
        return data


def _describe_mismatch(stored: Mapping, spec: GridSpec) -> str:
    now = spec.fingerprint()
    diffs = []
    old_spec = stored.get("spec", {}) if isinstance(stored, Mapping) else {}
    for key, value in now["spec"].items():
        if old_spec.get(key) != value:
            diffs.append(key.replace("_", " "))
    if stored.get("ionbal_version") != now["ionbal_version"]:
        diffs.append(f"ionbal version {stored.get('ionbal_version')} vs {now['ionbal_version']}")
    if stored.get("tables") != now["tables"]:
        diffs.append("data tables")
    return "differs in " + ", ".join(diffs) if diffs else "different fingerprint"


def _warn(message: str) -> None:
    print(f"ionbal: warning: {message}", file=sys.stderr)


# ---------------------------------------------------------------------------------------------------
# executors
# ---------------------------------------------------------------------------------------------------

def _run_serial(tasks: Iterable[TileTask]) -> Iterator[tuple[Tile, dict]]:
    for task in tasks:
        yield task.tile, compute_tile(task)


def _run_threads(tasks: Iterable[TileTask], workers: int) -> Iterator[tuple[Tile, dict]]:
    """A thread pool; at most 2 x workers tiles are in flight (bounded memory)."""
    workers = max(1, int(workers))
    with cf.ThreadPoolExecutor(max_workers=workers, thread_name_prefix="ionbal-tile") as pool:
        pending: dict[cf.Future, Tile] = {}
        it = iter(tasks)
        try:
            for task in it:
                pending[pool.submit(compute_tile, task)] = task.tile
                if len(pending) >= 2 * workers:
                    break
            while pending:
                done, _ = cf.wait(pending, return_when=cf.FIRST_COMPLETED)
                for fut in done:
                    tile = pending.pop(fut)
                    yield tile, fut.result()
                    nxt = next(it, None)
                    if nxt is not None:
                        pending[pool.submit(compute_tile, nxt)] = nxt.tile
        finally:
            for fut in pending:
                fut.cancel()


@contextlib.contextmanager
def dask_client(scheduler: str | None = None, *, local_cluster: bool = False, workers: int | None = None):
    """A ``dask.distributed`` client: to ``scheduler`` (an address), or to a new local cluster on 127.0.0.1."""
    try:
        from dask.distributed import Client, LocalCluster
    except ImportError:
        raise ValueError("running tiles on Dask needs dask.distributed; install it with "
                         "pip install 'ionbal[dask]'") from None
    if scheduler:
        try:
            client = Client(scheduler, timeout="20s")
        except (OSError, TimeoutError, ValueError) as exc:
            raise OSError(f"cannot connect to the Dask scheduler at {scheduler}: {exc}") from None
        try:
            yield client
        finally:
            client.close()
        return
    if not local_cluster:
        raise ValueError("dask_client needs a scheduler address or local_cluster=True")
    n = max(1, int(workers or os.cpu_count() or 1))
    cluster = LocalCluster(n_workers=n, processes=True, threads_per_worker=1, host="127.0.0.1",
                           dashboard_address=None)
    client = Client(cluster)
    try:
        yield client
    finally:
        client.close()
        cluster.close()


def _run_dask(tasks: Iterable[TileTask], client) -> Iterator[tuple[Tile, dict]]:
    """Tiles on a Dask cluster; at most 2 tiles per worker thread are in flight (bounded driver memory)."""
    from dask.distributed import as_completed

    try:
        n_threads = sum(client.nthreads().values())
    except Exception:  # noqa: BLE001 - informational only
        n_threads = 1
    limit = max(2, 2 * n_threads)
    it = iter(tasks)
    futures = {}
    for task in it:
        fut = client.submit(compute_tile, task, pure=False)
        futures[fut] = task.tile
        if len(futures) >= limit:
            break
    ac = as_completed(list(futures))
    try:
        for fut in ac:
            tile = futures.pop(fut)
            result = fut.result()
            fut.release()
            yield tile, result
            nxt = next(it, None)
            if nxt is not None:
                nf = client.submit(compute_tile, nxt, pure=False)
                futures[nf] = nxt.tile
                ac.add(nf)
    finally:
        for fut in futures:
            with contextlib.suppress(Exception):
                fut.cancel()


# ---------------------------------------------------------------------------------------------------
# the run
# ---------------------------------------------------------------------------------------------------

@dataclass
class GridRun:
    """What a finished :func:`run_grid` did."""

    path: Path
    spec: GridSpec
    n_points: int
    n_tiles: int
    tiles_resumed: int
    points_computed: int
    wall_time: float
    compute_time: float
    write_time: float
    file_size: int
    status_counts: dict = field(default_factory=dict)
    validity_counts: dict = field(default_factory=dict)

    @property
    def points_per_second(self) -> float:
        """Points computed in this run per second of wall time (resumed tiles excluded)."""
        return self.points_computed / self.wall_time if self.wall_time > 0 else float("nan")

    @property
    def converged(self) -> int:
        return int(self.status_counts.get(st.STATUS_TABLE[st.OK][0], 0))

    def summary(self) -> str:
        """A few readable lines."""
        size = self.file_size
        size_s = f"{size / 1e9:.2f} GB" if size >= 1e9 else f"{size / 1e6:.1f} MB"
        sp = self.spec
        n_el = len(sp.mixture)
        lines = [f"ionbal grid: wrote {self.path} ({size_s})"]
        lines += ["  " + ln for ln in sp.describe()]
        lines.append(f"  species     {len(sp.species)} ({_species_summary(sp, n_el)})"
                     + (", with number densities" if sp.number_densities else "")
                     + (", float32 cubes" if sp.float32 else ""))
        lines.append(f"  points      {self.n_points:,} in {self.n_tiles} tiles of up to "
                     f"{sp.tile_shape[0]}x{sp.tile_shape[1]}"
                     + (f" ({self.tiles_resumed} resumed from an earlier run)" if self.tiles_resumed else ""))
        lines.append(f"  wall time   {self.wall_time:.1f} s (solving {self.compute_time:.1f} s, writing "
                     f"{self.write_time:.1f} s); {self.points_per_second:,.0f} points/s")
        counts = ", ".join(f"{k} {v:,}" for k, v in self.status_counts.items() if k != "ok" and v)
        lines.append(f"  converged   {self.converged:,} of {self.n_points:,}" + (f"  (other: {counts})" if counts
                                                                                   else ""))
        flagged = {k: v for k, v in self.validity_counts.items() if v and k != "unsolved"}
        if self.validity_counts:
            lines.append("  validity    " + (", ".join(f"{k} {v:,}" for k, v in flagged.items()) + " point(s) "
                                            "flagged (ideal-gas LTE Saha doubtful there; see ionbal.validity)"
                                            if flagged else "no point flagged"))
        return "\n".join(lines)


def _species_summary(spec: GridSpec, n_el: int) -> str:
    if tuple(spec.species) == default_species(spec.mixture):
        return f"stages I-III of {n_el} elements, and H-"
    if tuple(spec.species) == all_species(spec.mixture):
        return f"every stage of {n_el} elements, and H-"
    shown = list(spec.species[:6])
    return ", ".join(shown) + (", ..." if len(spec.species) > 6 else "")


def _check_output(output: Path, overwrite: bool) -> None:
    if output.exists() and output.is_dir():
        raise IsADirectoryError(f"output {output} is a directory; give a file name")
    if output.exists() and not overwrite:
        raise FileExistsError(f"output {output} already exists; pass --overwrite (overwrite=True) to "
                              "replace it")
    parent = output.parent if str(output.parent) else Path(".")
    if not parent.is_dir():
        raise FileNotFoundError(f"cannot write {output}: directory {parent} does not exist")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise PermissionError(f"cannot write {output}: directory {parent} is not writable")


def run_grid(spec: GridSpec, output: str | os.PathLike = DEFAULT_OUTPUT, *, overwrite: bool = False,
             discard_parts: bool = False, executor: str | None = None, workers: int | None = None,
             scheduler: str | None = None, local_cluster: bool = False, progress: bool | None = None,
             command: str | None = None, keep_parts: bool = False,
             notify: Callable[[str], None] | None = None) -> GridRun:
    """Compute a grid into an HDF5 file, resumably.

    Parameters
    ----------
    spec : GridSpec
        What to compute.
    output : path
        The HDF5 file to write.  It appears only when complete.
    overwrite : bool
        Replace an existing ``output`` (kept untouched until the new file is
        complete).  Without it an existing file is an error.
    discard_parts : bool
        Start over when ``<output>.parts`` holds the parts of a different grid
        (otherwise that is an error).  Matching parts are always resumed.
    executor : {"serial", "threads", "dask"}, optional
        Default: "dask" when ``scheduler`` or ``local_cluster`` is given, else "serial".
    workers : int, optional
        serial: numba threads (default all cores); threads: pool size;
        local Dask cluster: worker processes (one thread each).
    scheduler : str, optional
        Address of a running Dask scheduler (e.g. ``tcp://10.0.0.5:8786``).
    local_cluster : bool
        Start a local Dask cluster of ``workers`` processes on 127.0.0.1.
    progress : bool, optional
        Draw a progress bar on stderr; default: only when stderr is a terminal.
    command : str, optional
        The command or call that made the file (stored in its ``history``).
    keep_parts : bool
        Keep the work directory after writing (for debugging).
    notify : callable, optional
        Called with one-line notes (resuming, writing).

    Returns
    -------
    GridRun
    """
    from . import io as gio

    if not isinstance(spec, GridSpec):
        raise TypeError(f"spec must be a GridSpec, got {type(spec).__name__}")
    t_start = time.monotonic()
    output = Path(output)
    _check_output(output, overwrite)
    if executor is None:
        executor = "dask" if (scheduler or local_cluster) else "serial"
    if executor not in ("serial", "threads", "dask"):
        raise ValueError(f"executor must be 'serial', 'threads' or 'dask', got {executor!r}")
    if executor == "dask" and not (scheduler or local_cluster):
        raise ValueError("the Dask executor needs a scheduler address or local_cluster=True")
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, (int, np.integer))
                                or workers < 1):
        raise ValueError(f"workers must be a positive integer, got {workers!r}")
    if command is None:
        command = "ionbal.grid.run_grid(...) from " + (" ".join(sys.argv) or "python")

    work = WorkDir(parts_dir_for(output), spec)
    created = not work.path.exists()
    for stale in work.path.parent.glob(f".{work.path.name}.removing-*"):  # left by a kill during cleanup
        shutil.rmtree(stale, ignore_errors=True)
    tiles = spec.tiles()
    compute_time = 0.0
    try:
        work.open(discard=discard_parts)
        done = work.finished() & set(range(len(tiles)))
        todo = [t for t in tiles if t.index not in done]
        if done and notify:
            notify(f"resuming: {len(done)} of {len(tiles)} tiles were already computed in {work.path}")
        bar = Progress(spec.n_points, enabled=progress)
        bar.skip(sum(tiles[i].size for i in done))
        t_compute = time.monotonic()
        try:
            if todo:
                if executor == "serial":
                    with _numba_threads(workers):
                        _consume(_run_serial(_lazy_tasks(spec, todo)), work, bar)
                elif executor == "threads":
                    n = int(workers or os.cpu_count() or 1)
                    stream = _run_threads(_lazy_tasks(spec, todo), n)
                    _consume(stream, work, bar)
                else:
                    with dask_client(scheduler, local_cluster=local_cluster, workers=workers) as client:
                        threads = 1 if local_cluster else None
                        _consume(_run_dask(_lazy_tasks(spec, todo, threads), client), work, bar)
        finally:
            bar.close()
        compute_time = time.monotonic() - t_compute
        points_computed = sum(t.size for t in todo)

        t_write = time.monotonic()
        if notify and todo:
            notify(f"writing {output}")
        tmp = work.path / "assembling.h5"
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
        counts = gio.write_grid_file(tmp, spec, _tile_stream(work, spec, tiles), command=command)
        vcounts = gio.read_attr_json(tmp, "validity_counts")
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, output)
        _fsync_dir(output.parent if str(output.parent) else Path("."))
        write_time = time.monotonic() - t_write
    except BaseException:
        if created and work.path.is_dir() and not work.finished():
            work.remove()  # nothing worth keeping: leave no trace of this run
        else:
            work.close()
        raise
    if keep_parts:
        work.close()
    else:
        work.remove()
    return GridRun(path=output, spec=spec, n_points=spec.n_points, n_tiles=len(tiles),
                   tiles_resumed=len(tiles) - len(todo), points_computed=points_computed,
                   wall_time=time.monotonic() - t_start, compute_time=compute_time, write_time=write_time,
                   file_size=output.stat().st_size, status_counts=counts, validity_counts=vcounts)


@contextlib.contextmanager
def _numba_threads(n: int | None):
    """Use ``n`` numba threads inside the block (restored afterwards)."""
    if not n:
        yield
        return
    from .core.config import get_num_threads, set_num_threads

    old = get_num_threads()
    try:
        set_num_threads(max(1, min(int(n), _max_numba_threads())))
    except Exception:  # noqa: BLE001 - thread count is a hint
        pass
    try:
        yield
    finally:
        with contextlib.suppress(Exception):
            set_num_threads(old)


def _max_numba_threads() -> int:
    from .core.config import max_num_threads

    return max_num_threads()


def _lazy_tasks(spec: GridSpec, tiles: Sequence[Tile], numba_threads: int | None = None) -> Iterator[TileTask]:
    for t in tiles:
        yield spec.task(t, numba_threads)


def _consume(stream: Iterator[tuple[Tile, dict]], work: WorkDir, bar: Progress) -> None:
    for tile, arrays in stream:
        work.save(tile, arrays)
        bar.update(tile.size)


def _tile_stream(work: WorkDir, spec: GridSpec, tiles: Sequence[Tile]) -> Iterator[tuple[Tile, dict]]:
    """Finished tiles in order, one at a time; a missing or damaged one is recomputed here."""
    for tile in tiles:
        data = work.load(tile)
        if data is None:
            data = compute_tile(spec.task(tile))
            work.save(tile, data)
        yield tile, data
