"""Writing a grid file (the layout is described in :mod:`ionbal.io`)."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any, Iterable, Mapping

import numpy as np

from .._version import __version__
from ..core import status as st
from ..quantities import POINT_OUTPUTS, QUANTITIES, THERMO_OUTPUTS
from .netcdf import (
    FILE_TYPE_GRID,
    FORMAT_VERSION,
    _coordinate,
    _flag_counts_dict,
    _h5py,
    _status_attrs,
    _validity_attrs,
    _variable,
)
from .provenance import assumptions, molecules_record
from .provenance import _history, _references_text, data_sources

__all__ = ["write_grid_file"]


def write_grid_file(path, spec, tiles: Iterable[tuple[Any, Mapping[str, np.ndarray]]], *,
                    command: str | None = None) -> dict:
    """Write a complete grid file at ``path`` (created; must not exist) from finished tiles.

    ``tiles`` yields ``(Tile, arrays)`` as made by :func:`ionbal.grid.compute_tile`;
    every tile of ``spec`` must come exactly once.  Memory stays bounded by one
    tile.  The completeness marker is written last.  This is the low-level
    writer used by :func:`ionbal.grid.run_grid`, which also handles temporary
    names, resuming and overwriting.

    Returns
    -------
    dict
        Point counts per status name (``{"ok": ..., ...}``).
    """
    h5py = _h5py()
    from ..data.elements import atomic_mass
    from ..data.tables import partition_function

    path = Path(path)
    comp = spec.has_composition
    sv = spec.state_variable
    nt, ns = len(spec.temperature), len(spec.state)
    comp_shape = (len(spec.metallicity), len(spec.alpha)) if comp else ()
    comp_dims = ("metallicity", "alpha") if comp else ()
    ct, cs = spec.chunk_shape
    n_sp = len(spec.species)
    mix = spec.mixture
    elements = mix.elements
    counts = np.zeros(256, dtype=np.int64)
    flag_counts = np.zeros(8, dtype=np.int64)
    seen = np.zeros(len(spec.tiles()), dtype=bool)

    with h5py.File(path, "w", track_order=True, libver=("earliest", "latest")) as f:
        dimid = 0
        for name, values in ((("metallicity", spec.metallicity), ("alpha", spec.alpha)) if comp else ()):
            _coordinate(f, name, np.array(values, dtype=np.float64), units="1", dimid=dimid)
            dimid += 1
        _coordinate(f, "temperature", spec.temperature.array, units="K", dimid=dimid)
        _coordinate(f, sv, spec.state.array, units=QUANTITIES[sv].unit, dimid=dimid + 1)
        f["temperature"].attrs["spacing"] = spec.temperature.spacing
        f[sv].attrs["spacing"] = spec.state.spacing
        _coordinate(f, "species", spec.species, dimid=dimid + 2)
        _coordinate(f, "element", elements, dimid=dimid + 3)
        molecules = tuple(spec.molecules) if spec.molecules else ()
        if molecules:
            _coordinate(f, "molecule", molecules, dimid=dimid + 4,
                        long_name="molecule by chemical formula (H2, CO, H2O, H2+, ...)")

        pdims = comp_dims + ("temperature", sv)
        pshape = comp_shape + (nt, ns)
        pchunks = (1,) * len(comp_shape) + (ct, cs)
        point_vars = {}
        for name in POINT_OUTPUTS:
            if name != sv:
                point_vars[name] = _variable(f, name, pdims, pshape, np.float64, chunks=pchunks)
        if spec.thermo:
            for name in THERMO_OUTPUTS:
                point_vars[name] = _variable(f, name, pdims, pshape, np.float64, chunks=pchunks)
        point_vars["status"] = _variable(f, "status", pdims, pshape, np.int8, chunks=pchunks)
        _status_attrs(point_vars["status"])
        point_vars["iterations"] = _variable(f, "iterations", pdims, pshape, np.int32, chunks=pchunks)
        if spec.validity:
            point_vars["validity"] = _variable(f, "validity", pdims, pshape, np.uint8, chunks=pchunks)
            _validity_attrs(point_vars["validity"])

        cdims = comp_dims + ("species", "temperature", sv)
        cshape = comp_shape + (n_sp, nt, ns)
        cchunks = (1,) * len(comp_shape) + (1, ct, cs)
        # double-precision cubes are stored without deflate (still chunked and checksummed): their
        # mantissas are close to random, deflate shrinks them by only ~20 % at ~14x the CPU time of
        # the write (benchmarks/storage.py, benchmarks/README.md); float32 cubes shrink to ~70 % and keep it
        deflate = bool(spec.float32)
        cubes = {"ion_fraction": _variable(f, "ion_fraction", cdims, cshape, spec.cube_dtype, chunks=cchunks,
                                           compress=deflate)}
        if spec.number_densities:
            cubes["number_density"] = _variable(f, "number_density", cdims, cshape, spec.cube_dtype,
                                                chunks=cchunks, compress=deflate)
        if molecules:
            mdims = comp_dims + ("molecule", "temperature", sv)
            cubes["molecule_number_density"] = _variable(
                f, "molecule_number_density", mdims, comp_shape + (len(molecules), nt, ns), spec.cube_dtype,
                chunks=cchunks, units=QUANTITIES["number_density"].unit, compress=deflate,
                long_name="number density of the molecule (one particle each; its nuclei are in the "
                          "elements' budgets)")
        if spec.thermo:
            edims = comp_dims + ("element", "temperature", sv)
            eshape = comp_shape + (len(elements), nt, ns)
            for key, text in (("electron_donor", "share of the free electrons supplied by the element "
                                                 "(sums to 1 over the elements)"),
                              ("dlnne_dA", "d ln n_e / d A(X) at constant temperature and gas pressure "
                                           "[per dex of the element's abundance]")):
                ds = _variable(f, key, edims, eshape, np.float64, chunks=cchunks, units="1", long_name=text)
                ds.attrs["comment"] = "elements are labelled by the 'element' coordinate" + (
                    "; molecular ions count for the element of their charged product" if molecules else "")
                cubes[key] = ds
        for key, ds in cubes.items():
            if key in ("electron_donor", "dlnne_dA"):
                continue
            ds.attrs["comment"] = (("molecules are labelled by the 'molecule' coordinate; "
                                    if key == "molecule_number_density"
                                    else "species are labelled by the 'species' coordinate; ")
                                   + ("single precision: values below ~1e-45 are stored as 0"
                                      if spec.float32 else "double precision"))

        T = spec.temperature.array
        pf = np.empty((n_sp, nt))
        for k, name in enumerate(spec.species):
            pf[k] = partition_function(name, T)
        _variable(f, "partition_function", ("species", "temperature"), (n_sp, nt), np.float64,
                  chunks=(min(n_sp, 64), nt), data=pf,
                  long_name="partition function of the species on the temperature axis (H- and bare nuclei: 1)")

        _variable(f, "atomic_number", ("element",), (len(elements),), np.int32,
                  data=np.asarray(mix.atomic_numbers, dtype=np.int32), units="1")
        _variable(f, "atomic_mass", ("element",), (len(elements),), np.float64,
                  data=np.array([atomic_mass(el) for el in elements]))
        if comp:
            ab = np.empty(comp_shape + (len(elements),))
            for c in spec.compositions():
                m = spec.mixture_at(c)
                ab[c] = [m[el] for el in elements]
        else:
            ab = np.asarray(mix.log_eps, dtype=np.float64)
        _variable(f, "abundance", comp_dims + ("element",), ab.shape, np.float64, data=ab,
                  long_name="A(X) = log10(N_X / N_H) + 12 of every element of the mixture")

        sources = data_sources()
        f.attrs["title"] = "ionbal LTE ionization-balance grid"
        f.attrs["Conventions"] = "CF-1.10"
        f.attrs["source"] = f"ionbal {__version__}"
        f.attrs["history"] = _history(command)
        f.attrs["references"] = _references_text(sources)
        f.attrs["comment"] = (assumptions(molecules) + " Default species: stages I-III of every element of the "
                              "mixture plus H-. Failed points (status != 0) hold NaN.")
        f.attrs["ionbal_version"] = __version__
        f.attrs["ionbal_file_type"] = FILE_TYPE_GRID
        f.attrs["ionbal_format_version"] = np.int32(FORMAT_VERSION)
        f.attrs["state_variable"] = sv
        f.attrs["mixture_name"] = mix.name
        f.attrs["ionbal_molecules"] = molecules_record(molecules)
        f.attrs["data_sources"] = json.dumps(sources, sort_keys=True)
        f.attrs["ionbal_grid_spec"] = json.dumps(spec.to_dict(), sort_keys=True)
        f.attrs["ionbal_complete"] = np.int8(0)

        tiles_list = spec.tiles()
        for tile, arrays in tiles:
            if seen[tile.index]:
                raise ValueError(f"tile {tile.index} was given twice")
            seen[tile.index] = True
            sel = tuple(tile.composition) + (slice(tile.t0, tile.t1), slice(tile.s0, tile.s1))
            csel = tuple(tile.composition) + (slice(None), slice(tile.t0, tile.t1), slice(tile.s0, tile.s1))
            for name, ds in point_vars.items():
                ds[sel] = arrays[name]
            for name, ds in cubes.items():
                ds[csel] = arrays[name]
            counts += np.bincount(arrays["status"].ravel().astype(np.uint8), minlength=256)
            if spec.validity:
                vm = np.asarray(arrays["validity"], dtype=np.uint8)
                for bit in range(8):
                    flag_counts[bit] += int(np.count_nonzero(vm & np.uint8(1 << bit)))
        if not seen.all():
            missing = int(np.flatnonzero(~seen)[0])
            raise ValueError(f"tile {missing} of {len(tiles_list)} was never written")
        status_counts = {st.STATUS_TABLE.get(c, (f"code_{c}",))[0]: int(counts[c])
                         for c in range(256) if counts[c] or c in st.STATUS_TABLE}
        f.attrs["status_counts"] = json.dumps(status_counts)
        if spec.validity:
            f.attrs["validity_counts"] = json.dumps(_flag_counts_dict(flag_counts))
        f.flush()
        f.attrs["ionbal_complete"] = np.int8(1)
    return status_counts

