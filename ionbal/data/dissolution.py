"""Level groups for the occupation probabilities of dense gas (see :mod:`ionbal.core.occupation`).

``tables/level_groups.ecsv`` holds, for every species whose tabulated ln U is
a level sum (stages I-III with NIST level lists, H I analytic to n = 17), its
levels grouped by effective principal quantum number n* = (q + 1) sqrt(R / (chi - E)):
per group the summed weight g, the mean n* and the mean energy.  This module
reads it once and, for a packed mixture, returns the flat arrays the kernel
:func:`ionbal.core.occupation.dlnu_many` takes.  Stages whose partition
function the caller overrode, and stages without a level sum (stages IV and
higher, bare nuclei, H-), are not treated: their correction is 0.
"""

from __future__ import annotations

from functools import lru_cache
from typing import NamedTuple

import numpy as np

from ._files import _read_ecsv
from .tables import partition_grid

__all__ = ["DissolutionArrays", "level_groups", "dissolution_arrays"]


class DissolutionArrays(NamedTuple):
    """Treated stages of a packed mixture and their level groups (descending n* per stage)."""

    stage: np.ndarray    # int64 [k]: index of each treated stage in the packed stage arrays
    z: np.ndarray        # float64 [k]: charge of the core an excited electron sees (q + 1)
    start: np.ndarray    # int64 [k + 1]: groups of stage j are start[j]:start[j+1]
    nstar: np.ndarray    # float64 [n_groups]: mean effective quantum number
    lng: np.ndarray      # float64 [n_groups]: ln of the summed statistical weight
    energy: np.ndarray   # float64 [n_groups]: mean excitation energy [eV]


@lru_cache(maxsize=1)
def level_groups() -> dict:
    """``{(Z, charge): (nstar, g, energy)}`` from ``level_groups.ecsv``, each sorted by descending n*."""
    names, rows = _read_ecsv("level_groups.ecsv")
    col = {n: i for i, n in enumerate(names)}
    acc: dict = {}
    for r in rows:
        key = (int(r[col["Z"]]), int(r[col["charge"]]))
        acc.setdefault(key, []).append((float(r[col["n_eff"]]), float(r[col["g"]]), float(r[col["energy"]])))
    out = {}
    for key, groups in acc.items():
        a = np.array(sorted(groups, key=lambda t: -t[0]), dtype=np.float64)
        out[key] = (a[:, 0].copy(), a[:, 1].copy(), a[:, 2].copy())
    return out


def dissolution_arrays(packed) -> DissolutionArrays:
    """The kernel arrays of the treated stages of ``packed`` (a :class:`~ionbal.data.pack.PackedMixture`)."""
    cached = getattr(packed, "_dissolution", None)
    if cached is not None:
        return cached
    grid = partition_grid()
    groups = level_groups()
    stage, z, start, nstar, lng, energy = [], [], [0], [], [], []
    for s, sp in enumerate(packed.species):
        key = (sp.Z, sp.charge)
        if key not in groups or key not in grid.row:
            continue
        if int(packed.stage_row[s]) != int(grid.row[key]):
            continue  # partition function overridden by the caller: leave it alone
        ns, g, e = groups[key]
        stage.append(s)
        z.append(float(sp.charge + 1))
        nstar.extend(ns)
        lng.extend(np.log(g))
        energy.extend(e)
        start.append(len(nstar))
    arrays = DissolutionArrays(np.asarray(stage, dtype=np.int64), np.asarray(z, dtype=np.float64),
                               np.asarray(start, dtype=np.int64), np.asarray(nstar, dtype=np.float64),
                               np.asarray(lng, dtype=np.float64), np.asarray(energy, dtype=np.float64))
    try:
        object.__setattr__(packed, "_dissolution", arrays)
    except (AttributeError, TypeError):  # pragma: no cover - not a PackedMixture
        pass
    return arrays
