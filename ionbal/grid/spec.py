"""What a grid computes: :class:`GridSpec` (axes, mixtures, species, storage options) and its tiles."""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass
from typing import Mapping

import numpy as np

from .._version import __version__
from ..data.mixture import Mixture
from ..selection import resolve_species
from ..validate import check_max_iterations, check_tol, outside_temperature_range, table_temperature_range
from .axis import DEFAULT_STATE_AXIS, DEFAULT_TEMPERATURE_AXIS, STATE_AXES, Axis

__all__ = ["GridSpec", "Tile", "TileTask", "default_spec", "DEFAULT_TILE_SIZE", "CHUNK_SIDE", "MAX_POINTS"]


#: default number of points per tile (a 64 x 64 block)
DEFAULT_TILE_SIZE = 4096


#: HDF5 chunks are at most this many points along each state axis (tiles are multiples of it)
CHUNK_SIDE = 64


#: largest grid accepted (points); far beyond any sensible use, it catches typos
MAX_POINTS = 2**33


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
    molecules: tuple | bool = False
    thermo: bool = False


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
    molecules : bool or sequence of formulas
        Molecules solved with the ions, as in :func:`ionbal.solve` (default False; True: every
        tabulated molecule the mixture can form).  Stored resolved (the tuple of labels, or False), so
        that resuming with another choice is refused; with molecules the file has a
        ``molecule`` coordinate and a ``molecule_number_density`` cube.
    thermo : bool
        Also store the thermodynamic quantities of :data:`ionbal.quantities.THERMO_OUTPUTS`
        (per point) and the cubes ``electron_donor`` and ``dlnne_dA`` (per element and point:
        the share of the free electrons each element supplies, d ln n_e / d A(X)); atoms only.
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
    molecules: tuple | bool = False
    thermo: bool = False

    def __post_init__(self) -> None:
        from ..api import default_mixture

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
        object.__setattr__(self, "molecules", _resolve_molecules(mix, self.molecules))
        for name in ("number_densities", "float32", "validity", "thermo"):
            object.__setattr__(self, name, bool(getattr(self, name)))
        ts = self.tile_size
        if isinstance(ts, bool) or not isinstance(ts, (int, np.integer)) or ts < 1:
            raise ValueError(f"tile_size must be a positive integer (points per tile), got {ts!r}")
        if ts > 50_000_000:
            raise ValueError(f"tile_size {ts} is too large (at most 50,000,000 points per tile)")
        object.__setattr__(self, "tile_size", int(ts))
        object.__setattr__(self, "tol", check_tol(self.tol))
        object.__setattr__(self, "max_iterations", check_max_iterations(self.max_iterations))
        tv = self.temperature.array
        out = outside_temperature_range(tv)
        if out.any():
            i = int(np.flatnonzero(out)[0])
            t_lo, t_hi = table_temperature_range()
            raise ValueError(f"temperature axis value {tv[i]:g} K at position {i} is outside the "
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
            molecules=self.molecules,
            thermo=self.thermo,
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
            # atoms-only specs keep their former layout (no key): files without it are atoms-only
            **({"molecules": list(self.molecules)} if self.molecules else {}),
            **({"thermo": True} if self.thermo else {}),
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
            molecules=tuple(d["molecules"]) if d.get("molecules") else False,
            thermo=bool(d.get("thermo", False)),
        )

    def fingerprint(self) -> dict:
        """What must match for stored tiles to be reused: the spec, ionbal's version, the data tables."""
        from ..io.provenance import data_sources

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
        lines.append(f"molecules   {len(self.molecules)}" if self.molecules else "molecules   none (atoms only)")
        return lines


def _resolve_molecules(mixture: Mixture, molecules) -> tuple | bool:
    """The molecule choice of a spec, resolved: False, or the labels of the molecules solved."""
    from ..api import _check_molecules
    from ..data.molecules import pack_molecules
    from ..data.pack import pack

    choice = _check_molecules(molecules)
    if choice is False:
        return False
    labels = tuple(str(m) for m in pack_molecules(pack(mixture), choice).molecules)
    return labels or False


def default_spec(**changes) -> GridSpec:
    """The default grid of ``ionbal grid``.

    AGSS09; T 2,000-50,000 K (301 values, log) x P_gas 1e-4-1e8 dyn cm^-2 (241 values, log).
    """
    kw = dict(temperature=Axis.parse("temperature", DEFAULT_TEMPERATURE_AXIS),
              state=Axis.parse("gas_pressure", DEFAULT_STATE_AXIS))
    kw.update(changes)
    return GridSpec(**kw)

