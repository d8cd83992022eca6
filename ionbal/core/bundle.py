"""The one bundle of mixture arrays every kernel takes.

A mixture is packed once (:mod:`ionbal.data.pack`) into a :class:`MixtureArrays`
named tuple; kernels receive that one argument instead of a dozen arrays, so
adding an array to the packing changes the bundle and the kernels that read
it, not every signature and every caller.  numba compiles attribute access
on a named tuple to a plain field load, so nothing is paid at run time.

Fields (fixed cgs units, energies in eV; see :mod:`ionbal.core.saha`):

``elem_w``           number fraction of each element among all nuclei
``elem_first``       index of each element's first stage in the stage arrays
``elem_n``           number of stages of each element
``elem_q0``          charge of each element's first stage (-1 for H with H-)
``stage_chi``        energy [eV] from each stage to the next
``stage_row``        row of ``lnU`` holding the stage's ln U(T), or -1
``stage_lnu_const``  constant ln U of the stages without a row
``lnU``              ln U on the uniform grid ``log10 T = lt0 + i * dlt``
``lt0``, ``dlt``     that grid
``q_max``            net charge per nucleus at full ionization
``stage_k``          position of each stage within its element (float)
``stage_xcum``       cumulative ionization energy [eV] from the element's first stage
``stage_lnu_fix``    constant ln U of each stage (0 where tabulated)
``tab_stage``        the stages with a row of ``lnU``; ``tab_row`` those rows
``elem_lnwz``        ln(w_e Z_e): the most charge per nucleus an element can carry
(the last six built by :func:`closed_form_fields`).
"""

from __future__ import annotations

from collections import namedtuple

import numpy as np

__all__ = ["MixtureArrays", "FIELDS", "closed_form_fields"]

FIELDS = ("elem_w", "elem_first", "elem_n", "elem_q0", "stage_chi", "stage_row", "stage_lnu_const",
          "lnU", "lt0", "dlt", "q_max",
          "stage_k", "stage_xcum", "stage_lnu_fix", "tab_stage", "tab_row", "elem_lnwz")

MixtureArrays = namedtuple("MixtureArrays", FIELDS)


def closed_form_fields(elem_w, elem_first, elem_n, elem_q0, stage_chi, stage_row, stage_lnu_const):
    """``(stage_k, stage_xcum, stage_lnu_fix, tab_stage, tab_row, elem_lnwz)``.

    ``stage_k`` (float) position within the element, ``stage_xcum`` cumulative
    ionization energy [eV], ``stage_lnu_fix`` the constant ln U (0 where
    tabulated), ``tab_stage``/``tab_row`` the tabulated stages and their rows
    of ``lnU``, ``elem_lnwz = ln(w_e Z_e)`` (the most charge an element can
    carry per nucleus of the gas; used by the abundance-aware cut).
    """
    n_stage = stage_chi.size
    k = np.empty(n_stage)
    xc = np.empty(n_stage)
    for f, n in zip(elem_first, elem_n):
        k[f:f + n] = np.arange(n)
        xc[f] = 0.0
        xc[f + 1:f + n] = np.cumsum(stage_chi[f:f + n - 1])
    fix = np.where(stage_row < 0, stage_lnu_const, 0.0)
    tab = np.flatnonzero(stage_row >= 0).astype(np.int64)
    zmax = (elem_q0 + elem_n - 1).astype(np.float64)
    with np.errstate(divide="ignore"):
        lnwz = np.log(np.asarray(elem_w, float) * np.maximum(zmax, 1.0))
    return (k, xc, np.ascontiguousarray(fix, dtype=np.float64), tab,
            np.ascontiguousarray(stage_row[tab], dtype=np.int64), lnwz)
