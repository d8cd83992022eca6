"""Reading grid files: :func:`open_grid` and :class:`GridFile` (interpolation in :mod:`ionbal.io.interpolate`)."""

from __future__ import annotations

import contextlib
import json
from collections import OrderedDict
from pathlib import Path
from typing import Sequence

import numpy as np

from ..core import status as st
from ..quantities import POINT_OUTPUTS, STATE_INPUTS, THERMO_OUTPUTS, astropy_unit
from . import interpolate as _interp
from .netcdf import FILE_TYPE_GRID, QUANTITY_UNITS, GridFileError, _attr_str, _h5py, _short

__all__ = ["GridFile", "open_grid", "read_grid", "is_grid_file", "read_attr_json", "read_fingerprint"]


def is_grid_file(path) -> bool:
    """True if ``path`` is an HDF5 file written by ionbal as a grid (complete or not).

    Never raises for unreadable or foreign files; it returns False.
    """
    try:
        h5py = _h5py()
        if not Path(path).is_file() or not h5py.is_hdf5(path):
            return False
        with h5py.File(path, "r") as f:
            return _attr_str(f.attrs.get("ionbal_file_type")) == FILE_TYPE_GRID
    except Exception:  # noqa: BLE001 - identification must not fail
        return False


class GridFile:
    """An ionbal grid file opened for reading (use :func:`open_grid`).

    Arrays are read on demand and returned as numpy arrays in the stored
    units (cgs; see :attr:`units`).  The object is a context manager; close it
    (or leave the ``with`` block) to release the file.

    Attributes
    ----------
    path : Path
    dims : tuple of str
        Dimension names of the per-point arrays, e.g. ``("temperature", "gas_pressure")``.
    shape : tuple of int
    axes : dict name -> ndarray
        Coordinate values of every grid axis (composition axes first).
    temperature, state : ndarray
        The two state axes; ``state_variable`` names the second.
    metallicity, alpha : ndarray or None
        Composition axes (None when the grid has none).
    species : tuple of str
        Species of the cubes, in spectroscopic notation.
    elements : tuple of str
    abundances : ndarray
        A(X) per element (``[i_metallicity, i_alpha, element]`` with composition axes).
    sources : dict
        Data tables used (title, sources, SHA-256).
    version, history : str
        The ionbal version and the command that wrote the file.
    variables : tuple of str
        Names of every stored dataset.
    units : dict name -> str
    """

    def __init__(self, path):
        h5py = _h5py()
        self.path = Path(path)
        p = self.path
        if not p.exists():
            raise FileNotFoundError(f"grid file {p} does not exist")
        if p.is_dir():
            raise IsADirectoryError(f"{p} is a directory, not a grid file")
        try:
            with open(p, "rb") as fh:
                head = fh.read(8)
        except OSError as exc:
            raise OSError(f"cannot read {p}: {exc.strerror or exc}") from None
        if head != b"\x89HDF\r\n\x1a\n":
            if not h5py.is_hdf5(p):
                raise GridFileError(f"{p} is not an HDF5 file (an ionbal grid file is HDF5)")
        try:
            self._f = h5py.File(p, "r")
        except (OSError, RuntimeError, ValueError) as exc:
            raise GridFileError(f"cannot open {p}: the HDF5 file is truncated or damaged "
                                f"({_short(exc)})") from None
        try:
            self._validate()
        except BaseException:
            self.close()
            raise
        self._cache: OrderedDict = OrderedDict()

    # -- validation -----------------------------------------------------------------------------
    def _validate(self) -> None:
        f = self._f
        p = self.path
        try:
            attrs = dict(f.attrs)
        except Exception as exc:  # noqa: BLE001
            raise GridFileError(f"cannot read the attributes of {p}: file damaged ({_short(exc)})") from None
        kind = _attr_str(attrs.get("ionbal_file_type"))
        if kind != FILE_TYPE_GRID:
            what = f"an ionbal {kind} file" if kind else "not an ionbal file"
            raise GridFileError(f"{p} is not an ionbal grid file ({what})")
        if int(np.asarray(attrs.get("ionbal_complete", 0))) != 1:
            raise GridFileError(f"{p} is incomplete: its writing was interrupted (no completeness marker)")
        self.state_variable = _attr_str(attrs.get("state_variable"))
        if self.state_variable not in STATE_INPUTS:
            raise GridFileError(f"{p}: unknown state variable {self.state_variable!r}")
        try:
            comp = "metallicity" in f
            self.dims = (("metallicity", "alpha") if comp else ()) + ("temperature", self.state_variable)
            self.axes = {d: self._read_raw(d) for d in self.dims}
            self.species = tuple(_attr_str(s) for s in self._read_raw("species"))
            self.elements = tuple(_attr_str(s) for s in self._read_raw("element"))
            self.molecules = tuple(_attr_str(s) for s in self._read_raw("molecule")) if "molecule" in f else ()
            self.abundances = self._read_raw("abundance")
            self.variables = tuple(f.keys())
        except KeyError as exc:
            raise GridFileError(f"{p} lacks a required dataset ({_short(exc)}); the file is damaged") from None
        self.shape = tuple(len(self.axes[d]) for d in self.dims)
        required = {name: self.shape for name in ("electron_density", "status", "nuclei_density")}
        required["ion_fraction"] = self.shape[:-2] + (len(self.species),) + self.shape[-2:]
        required["partition_function"] = (len(self.species), self.shape[-2])
        for name, shape in required.items():
            if name not in f:
                raise GridFileError(f"{p} lacks the dataset {name!r}; the file is damaged or not a grid")
            if tuple(f[name].shape) != tuple(shape):
                raise GridFileError(f"{p}: dataset {name!r} has shape {f[name].shape}, expected {shape} from "
                                    "the axes; the file is damaged")
        for d in self.dims:
            ax = self.axes[d]
            if ax.ndim != 1 or ax.size < 1 or not np.all(np.isfinite(ax)) or np.any(np.diff(ax) <= 0):
                raise GridFileError(f"{p}: the {d} axis is not a strictly increasing list of numbers")
        self.units = {name: _attr_str(f[name].attrs.get("units")) for name in self.variables
                      if "units" in f[name].attrs}
        self.version = _attr_str(attrs.get("ionbal_version"))
        self.history = _attr_str(attrs.get("history"))
        self.mixture_name = _attr_str(attrs.get("mixture_name"))
        try:
            self.sources = json.loads(_attr_str(attrs.get("data_sources")) or "{}")
        except ValueError:
            self.sources = {}
        try:
            self.spec_dict = json.loads(_attr_str(attrs.get("ionbal_grid_spec")) or "{}")
        except ValueError:
            self.spec_dict = {}
        try:
            self._status_counts = json.loads(_attr_str(attrs.get("status_counts")) or "{}")
        except ValueError:
            self._status_counts = None
        try:
            self._validity_counts = json.loads(_attr_str(attrs.get("validity_counts")) or "{}")
        except ValueError:
            self._validity_counts = {}

    # -- basic access ---------------------------------------------------------------------------
    def _read_raw(self, name, sel=()):
        try:
            ds = self._f[name]
            return ds[sel] if sel != () else ds[()]
        except KeyError:
            raise
        except (OSError, RuntimeError, ValueError) as exc:
            raise GridFileError(f"cannot read {name!r} from {self.path}: the data are damaged "
                                f"({_short(exc)})") from None

    @property
    def temperature(self) -> np.ndarray:
        return self.axes["temperature"]

    @property
    def state(self) -> np.ndarray:
        return self.axes[self.state_variable]

    @property
    def metallicity(self):
        return self.axes.get("metallicity")

    @property
    def alpha(self):
        return self.axes.get("alpha")

    @property
    def has_composition(self) -> bool:
        return "metallicity" in self.axes

    @property
    def mixture(self):
        """The mixture (an :class:`ionbal.Mixture`); for composition grids, the base mixture ([M/H] = 0)."""
        from ..data.mixture import Mixture

        d = self.spec_dict.get("mixture", {})
        if d.get("abundances"):
            return Mixture(d["abundances"], name=d.get("name", self.mixture_name or "custom"))
        return Mixture(dict(zip(self.elements, np.asarray(self.abundances).reshape(-1, len(self.elements))[0])),
                       name=self.mixture_name or "custom")

    def __getitem__(self, name: str) -> np.ndarray:
        """A stored variable as numpy, e.g. ``g["electron_density"]``.

        ``"temperature"`` and the state variable give their axis broadcast over
        the grid (shape :attr:`shape`, read-only); the axes themselves are
        :attr:`temperature` and :attr:`state`.
        """
        if name == self.state_variable or name == "temperature":
            ax = self.axes[name]
            full = np.broadcast_to(ax[:, None] if name == "temperature" else ax[None, :], self.shape[-2:])
            return np.broadcast_to(full, self.shape)
        if name not in self.variables:
            raise KeyError(f"{name!r} is not stored in {self.path}; it has {', '.join(self.variables)}")
        return self._cached(name, lambda: self._read_raw(name))

    def _cached(self, key, make):
        if key in self._cache:
            self._cache.move_to_end(key)
            return self._cache[key]
        value = make()
        self._cache[key] = value
        while len(self._cache) > 12:
            self._cache.popitem(last=False)
        return value

    def quantity(self, name: str):
        """A variable as an astropy Quantity."""
        unit = self.units.get(name, QUANTITY_UNITS.get(name, "1"))
        return self[name] * astropy_unit(unit)

    def _species_index(self, species) -> int:
        from ..data.species import parse_species

        name = str(parse_species(species))
        try:
            return self.species.index(name)
        except ValueError:
            raise ValueError(f"species {name} is not stored in {self.path}; it holds "
                             f"{_abbrev(self.species)}") from None

    def fraction(self, species) -> np.ndarray:
        """Ion fraction of one species over the whole grid (shape :attr:`shape`), float64."""
        k = self._species_index(species)
        lead = (slice(None),) * (len(self.shape) - 2)
        return self._cached(("fraction", k),
                            lambda: np.asarray(self._read_raw("ion_fraction", lead + (k,)), dtype=np.float64))

    def _molecule_index(self, species):
        """Index of a molecule in the ``molecule`` coordinate, or None for an atomic species."""
        from ..data.molecules import molecule_or_none

        m = molecule_or_none(species, self.molecules)  # "C2+" both C III and a molecule: refused as ambiguous
        if m is None:
            return None
        name = str(m)
        if name not in self.molecules:
            held = _abbrev(self.molecules) if self.molecules else "no molecules (an atoms-only grid)"
            raise ValueError(f"molecule {name} is not stored in {self.path}; it holds {held}")
        return self.molecules.index(name)

    def number_density(self, species) -> np.ndarray:
        """Number density [cm^-3] of one species or molecule (``"CO"``) over the whole grid.

        Read from the file when stored (molecules: ``molecule_number_density``), else
        fraction x nuclei density x the element's share of the nuclei (from the stored
        abundances).
        """
        m = self._molecule_index(species)
        if m is not None:
            lead = (slice(None),) * (len(self.shape) - 2)
            return self._cached(("molecule_number_density", m), lambda: np.asarray(
                self._read_raw("molecule_number_density", lead + (m,)), dtype=np.float64))
        k = self._species_index(species)
        if "number_density" in self.variables:
            lead = (slice(None),) * (len(self.shape) - 2)
            return self._cached(("number_density", k), lambda: np.asarray(
                self._read_raw("number_density", lead + (k,)), dtype=np.float64))
        from ..data.species import parse_species

        sp = parse_species(species)
        if sp.is_molecule or len(sp.composition) != 1:  # pragma: no cover - molecules: store number_density
            raise ValueError(f"{sp}: number densities of molecules must be stored in the file")
        (z, _), = sp.composition
        e = [int(v) for v in self._read_raw("atomic_number")].index(z)
        ab = np.asarray(self.abundances, dtype=np.float64)
        w = 10.0 ** (ab - ab.max(axis=-1, keepdims=True))
        share = (w[..., e] / w.sum(axis=-1))[..., None, None]
        with np.errstate(under="ignore"):
            return self.fraction(species) * self["nuclei_density"] * share

    def partition_function(self, species) -> np.ndarray:
        """Partition function of one species on the temperature axis."""
        k = self._species_index(species)
        return np.asarray(self._read_raw("partition_function", (k,)), dtype=np.float64)

    def status_counts(self) -> dict:
        """Points per status (``{"ok": n, ...}``)."""
        if self._status_counts:
            return dict(self._status_counts)
        codes = np.bincount(np.asarray(self["status"]).ravel().astype(np.uint8), minlength=256)
        return {st.STATUS_TABLE.get(c, (f"code_{c}",))[0]: int(codes[c]) for c in range(256)
                if codes[c] or c in st.STATUS_TABLE}

    def validity_counts(self) -> dict:
        """Points carrying each validity flag (``{"degenerate": n, ...}``; see :mod:`ionbal.validity`)."""
        return dict(self._validity_counts or {})

    def verify(self) -> None:
        """Read every dataset completely (checking each chunk's checksum); raises GridFileError if damaged."""
        for name in self.variables:
            ds = self._f[name]
            try:
                if ds.chunks:
                    for chunk in ds.iter_chunks():
                        ds[chunk]
                else:
                    ds[()]
            except (OSError, RuntimeError, ValueError) as exc:
                raise GridFileError(f"{self.path}: dataset {name!r} is damaged ({_short(exc)})") from None

    # -- interpolation (ionbal.io.interpolate) ---------------------------------------------------
    def _query(self, temperature, state, metallicity, alpha):
        return _interp.query(self, temperature, state, metallicity, alpha)

    def _interp_field(self, field_key: str, field, q: dict, method: str) -> np.ndarray:
        return _interp.interp_field(self, field_key, field, q, method)

    def interpolate(self, name: str, temperature, state, *, metallicity=None, alpha=None,
                    method: str = "linear") -> np.ndarray:
        """Interpolate a per-point quantity (e.g. ``"electron_density"``) at arbitrary points inside the grid.

        Interpolation is in log T, log(state variable) (and linear in the
        composition axes) of the log of the quantity: multilinear by default,
        ``method="cubic"`` for cubic splines.

        Parameters
        ----------
        name : str
            A per-point variable: electron_density, electron_pressure,
            gas_pressure, mass_density, hydrogen_density, nuclei_density,
            mean_molecular_weight.
        temperature, state : float, array or Quantity
            The points (broadcast together); ``state`` is the grid's state
            variable (:attr:`state_variable`), cgs for bare numbers.
        metallicity, alpha : float or array, optional
            Needed for grids with composition axes of more than one value.

        Raises
        ------
        ValueError
            For points outside the grid (naming the offending value and the
            grid range), or next to grid points that did not converge.
        """
        allowed = [v for v in POINT_OUTPUTS + THERMO_OUTPUTS if v in self.variables or v == self.state_variable]
        if name not in allowed:
            raise ValueError(f"cannot interpolate {name!r}: choose one of {', '.join(allowed)}, or use "
                             "interpolate_fraction / interpolate_number_density for species")
        q = self._query(temperature, state, metallicity, alpha)
        return self._interp_field(name, lambda: self[name], q, method)

    def interpolate_fraction(self, species, temperature, state, *, metallicity=None, alpha=None,
                             method: str = "linear") -> np.ndarray:
        """Interpolate the ion fraction of one species (see :meth:`interpolate`)."""
        k = self._species_index(species)
        q = self._query(temperature, state, metallicity, alpha)
        return self._interp_field(f"fraction {self.species[k]}", lambda: self.fraction(species), q, method)

    def interpolate_number_density(self, species, temperature, state, *, metallicity=None, alpha=None,
                                   method: str = "linear") -> np.ndarray:
        """Interpolate the number density [cm^-3] of one species or molecule (``"CO"``; see :meth:`interpolate`)."""
        m = self._molecule_index(species)
        label = self.molecules[m] if m is not None else self.species[self._species_index(species)]
        q = self._query(temperature, state, metallicity, alpha)
        return self._interp_field(f"number_density {label}", lambda: self.number_density(species), q, method)

    # -- lifecycle ------------------------------------------------------------------------------
    def close(self) -> None:
        f = getattr(self, "_f", None)
        if f is not None:
            with contextlib.suppress(Exception):
                f.close()
            self._f = None

    def __enter__(self) -> "GridFile":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def __del__(self):  # pragma: no cover - best effort
        with contextlib.suppress(Exception):
            self.close()

    def summary(self) -> str:
        """A readable multi-line description (what ``ionbal info`` prints)."""
        lines = [f"{self.path}: ionbal grid file (written by ionbal {self.version})"]
        for d in self.dims:
            ax = self.axes[d]
            unit = QUANTITY_UNITS.get(d, "")
            unit = "" if unit in ("", "1") else f" {unit}"
            spacing = _attr_str(self._f[d].attrs.get("spacing")) or "values"
            lines.append(f"  axis {d:<18} {len(ax):>6} values  {ax[0]:.6g} to {ax[-1]:.6g}{unit}"
                         + (f"  ({spacing})" if d in ("temperature", self.state_variable) else ""))
        n = int(np.prod(self.shape, dtype=np.int64))
        lines.append(f"  points            {n:,}")
        mix = self.mixture
        lines.append(f"  mixture           {self.mixture_name} ({len(self.elements)} elements: "
                     f"{_abbrev(self.elements, 12)})")
        show = [f"{el}={a:.2f}" for el, a in zip(mix.elements, mix.log_eps) if el in ("H", "He", "C", "N", "O",
                                                                                     "Mg", "Si", "Fe")]
        lines.append(f"  A(X)              {' '.join(show)}")
        cube = self._f["ion_fraction"]
        lines.append(f"  species           {len(self.species)} ({_abbrev(self.species, 8)}); cube "
                     f"{cube.dtype}" + (", number densities stored" if "number_density" in self.variables
                                       else ""))
        lines.append(f"  molecules         {len(self.molecules)} ({_abbrev(self.molecules, 8)}); number densities "
                     "stored" if self.molecules else "  molecules         none (atoms and atomic ions only)")
        if "gamma1" in self.variables:
            lines.append("  thermodynamics    " + ", ".join(v for v in THERMO_OUTPUTS if v in self.variables)
                         + "; electron_donor and dlnne_dA per element")
        counts = self.status_counts()
        lines.append("  status            " + ", ".join(f"{k} {v:,}" for k, v in counts.items()))
        vc = self.validity_counts()
        if vc:
            lines.append("  validity flags    " + ", ".join(f"{k} {v:,}" for k, v in vc.items())
                         + " (points where ideal-gas LTE Saha is doubtful; see ionbal.validity)")
        lines.append("  complete          yes (completeness marker set)")
        lines.append(f"  made by           {self.history}")
        for name, info in self.sources.items():
            title = info.get("title", "")
            lines.append(f"  source            {name}: {title} (sha256 {info.get('sha256', '')[:12]})")
        return "\n".join(lines)

    def __repr__(self) -> str:
        if getattr(self, "_f", None) is None:
            return f"<GridFile {self.path} (closed)>"
        dims = " x ".join(f"{d}[{n}]" for d, n in zip(self.dims, self.shape))
        return f"<GridFile {self.path}: {dims}, {len(self.species)} species, mixture {self.mixture_name!r}>"


def _abbrev(items: Sequence[str], n: int = 10) -> str:
    items = list(items)
    if len(items) <= n:
        return ", ".join(items)
    return ", ".join(items[: n - 2]) + ", ..., " + items[-1]


def open_grid(path) -> GridFile:
    """Open an ionbal grid file for reading and interpolation.

    Raises
    ------
    FileNotFoundError
        If the file does not exist.
    GridFileError
        (a ValueError) if it is not an HDF5 file, not an ionbal grid, truncated,
        damaged or incomplete.

    Examples
    --------
    >>> with ionbal.open_grid("ionbal-grid.h5") as g:                   # doctest: +SKIP
    ...     ne = g.interpolate("electron_density", 5777.0, 1.2e5)
    ...     fe2 = g.interpolate_fraction("Fe II", 5777.0, 1.2e5)
    """
    return GridFile(path)


#: alias of :func:`open_grid`, to pair with the writers
read_grid = open_grid


def read_attr_json(path, name: str) -> dict:
    """A JSON-valued root attribute of an HDF5 file ({} if absent or unreadable)."""
    h5py = _h5py()
    try:
        with h5py.File(path, "r") as f:
            return json.loads(_attr_str(f.attrs.get(name)) or "{}")
    except (OSError, ValueError):
        return {}


def read_fingerprint(path) -> dict | None:
    """What a complete grid file was made from: ``{"spec", "ionbal_version", "tables"}`` (as in a work
    directory's ``spec.json``), or None if ``path`` is not a complete, readable ionbal grid file."""
    h5py = _h5py()
    try:
        with h5py.File(path, "r") as f:
            a = f.attrs
            if _attr_str(a.get("ionbal_file_type")) != FILE_TYPE_GRID or int(np.asarray(a.get("ionbal_complete", 0))) != 1:
                return None
            sources = json.loads(_attr_str(a.get("data_sources")) or "{}")
            return {"spec": json.loads(_attr_str(a.get("ionbal_grid_spec")) or "{}"),
                    "ionbal_version": _attr_str(a.get("ionbal_version")),
                    "tables": {name: info.get("sha256", "") for name, info in sources.items()}}
    except (OSError, ValueError, TypeError, AttributeError):
        return None

