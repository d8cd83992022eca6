"""Derived per-stage arrays of the closed-form Saha weights (plain numpy, built once at pack time).

With ``k`` the position of stage ``s`` within its element and
``X_s = sum_{j<k} chi_j`` its cumulative ionization energy, the log Saha
weight of every stage follows in closed form (Saha 1920, Phil. Mag. 40, 472):

    C[s] = k * base(T) - X_s / kT + ln U_s(T)

(up to a constant per element, which cancels in every fraction).  No
recurrence runs over the stages, so the fill is a branch-free vector loop;
the few tabulated ln U (stages I-III) are added afterwards from
``tab_stage``/``tab_row``, and per-point additive ln U corrections (dense-gas
hook) from a short list of stages.
"""

from __future__ import annotations

import numpy as np

__all__ = ["closed_form_fields"]


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
