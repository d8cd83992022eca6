"""Saha factors and stage fractions: scalar numba kernels on plain float arrays.

Conventions (fixed cgs units; energies in eV):

* The mixture is packed into *element* arrays (``elem_*``, one entry per
  element) and flat *stage* arrays (``stage_*``, one entry per ionization
  stage, elements one after another).  Element ``e`` owns stages
  ``elem_first[e] ... elem_first[e] + elem_n[e] - 1`` with charges
  ``elem_q0[e], elem_q0[e] + 1, ...``; ``elem_q0`` is -1 for hydrogen, whose
  first stage is H-, and 0 otherwise.
* ``stage_chi[s]`` is the energy [eV] that takes stage ``s`` to ``s + 1``
  (unused for the last stage of an element).
* Partition functions: ``stage_row[s] >= 0`` points to a row of ``lnU``, a
  table of ln U on the uniform grid ``log10 T = lt0 + i * dlt``; otherwise
  ``stage_lnu[s]`` holds a constant ln U.

For a point of temperature T the kernels build the cumulative log Saha
weights ``C[s]``: with ``k`` the position of stage ``s`` within its element,

    ln(n_s / n_first) = C[s] - k * ln(n_e),
    C[first] = 0,  C[s+1] = C[s] + ln S_s(T),
    S_s(T) = 2 U_{s+1} / U_s * (2 pi m_e k T / h^2)^{3/2} * exp(-chi_s / kT)

(Saha 1920, Phil. Mag. 40, 472).  Stage fractions then follow from
``exp(C[s] - k x - max)`` with ``x = ln n_e``: every exponent is shifted by
its element's maximum, so nothing overflows or underflows however far a stage
lies from the dominant one.
"""

from __future__ import annotations

import math

import numpy as np

from .config import jit
from .constants import K_B_EV, LN_SAHA_CONST

#: terms whose log weight lies more than this below their element's maximum
#: are dropped from the moment sums: exp(-CUT) ~ 1e-20 relative.
CUT = 46.0
LN2 = math.log(2.0)


@jit
def table_position(T, lt0, dlt, n_t):
    """Row position ``(i, w)`` of T in the uniform log10 T table (clamped)."""
    u = (math.log10(T) - lt0) / dlt
    i = int(math.floor(u))
    if i < 0:
        i = 0
    elif i > n_t - 2:
        i = n_t - 2
    w = u - i
    if w < 0.0:
        w = 0.0
    elif w > 1.0:
        w = 1.0
    return i, w


@jit
def stage_lnu(s, i, w, stage_row, stage_lnu_const, lnU):
    """ln U of stage ``s`` at table position ``(i, w)``."""
    r = stage_row[s]
    if r < 0:
        return stage_lnu_const[s]
    return (1.0 - w) * lnU[r, i] + w * lnU[r, i + 1]


@jit
def element_log_weights(e, T, i, w, elem_first, elem_n, stage_chi, stage_row, stage_lnu_const, lnU, out):
    """Fill ``out[first:first+n]`` with the cumulative log Saha weights of element ``e``."""
    base = LN2 + LN_SAHA_CONST + 1.5 * math.log(T)
    beta = 1.0 / (K_B_EV * T)
    f = elem_first[e]
    out[f] = 0.0
    lnu_prev = stage_lnu(f, i, w, stage_row, stage_lnu_const, lnU)
    for k in range(1, elem_n[e]):
        s = f + k
        lnu_s = stage_lnu(s, i, w, stage_row, stage_lnu_const, lnU)
        out[s] = out[s - 1] + base + (lnu_s - lnu_prev) - stage_chi[s - 1] * beta
        lnu_prev = lnu_s


@jit
def log_weights(T, elem_first, elem_n, stage_chi, stage_row, stage_lnu_const, lnU, lt0, dlt, out):
    """Cumulative log Saha weights ``C`` of every stage of every element at T."""
    i, w = table_position(T, lt0, dlt, lnU.shape[1])
    for e in range(elem_first.size):
        element_log_weights(e, T, i, w, elem_first, elem_n, stage_chi, stage_row, stage_lnu_const, lnU, out)


@jit
def element_moments(C, f, n, q0, x):
    """Charge moments of one element at ``x = ln n_e``.

    Returns ``(pos, var, neg, mean)``: the mean positive charge, the variance
    of the charge, the mean negative charge (H-) and the mean charge.  The
    positive and negative parts are summed separately so that neither is lost
    to round-off when they nearly cancel (cool, dense gas where n(H-) rivals
    the positive ions).
    """
    m = -np.inf
    kp = 0
    for k in range(n):
        t = C[f + k] - k * x
        if t > m:
            m = t
            kp = k
    s0 = 0.0
    s1 = 0.0
    s2 = 0.0
    sp = 0.0
    sn = 0.0
    for k in range(n):
        t = C[f + k] - k * x - m
        if t > -CUT:
            wt = math.exp(t)
            d = k - kp
            s0 += wt
            s1 += wt * d
            s2 += wt * d * d
            q = q0 + k
            if q > 0:
                sp += q * wt
            elif q < 0:
                sn -= q * wt
    mean_d = s1 / s0
    var = s2 / s0 - mean_d * mean_d
    if var < 0.0:
        var = 0.0
    mean = (q0 + kp) + mean_d
    if q0 < 0:
        pos = sp / s0
    else:
        pos = mean
    return pos, var, sn / s0, mean


@jit
def charge_moments(C, x, elem_w, elem_first, elem_n, elem_q0):
    """Positive and negative charge per nucleus and their derivatives in ``x = ln n_e``.

    Returns ``(Qpos, Qneg, dQpos, dQneg)`` with ``Qpos = sum_e w_e <q>_+``
    (positive ions) and ``Qneg = sum_e w_e <q>_-`` (H-), so that charge
    conservation reads ``n_e + n_nuc Qneg = n_nuc Qpos``.  The derivatives use
    ``d<q>/dx = -Var(q)`` and, for the negative stage (the first stage of its
    element), ``d ln f_first / dx = <k>``.
    """
    Qpos = 0.0
    Qneg = 0.0
    dQ = 0.0
    dQneg = 0.0
    for e in range(elem_w.size):
        q0 = elem_q0[e]
        pos, var, neg, mean = element_moments(C, elem_first[e], elem_n[e], q0, x)
        we = elem_w[e]
        Qpos += we * pos
        dQ -= we * var
        if q0 < 0:
            Qneg += we * neg
            dQneg += we * neg * (mean - q0)
    return Qpos, Qneg, dQ + dQneg, dQneg


@jit
def element_log_fractions(C, f, n, x, out):
    """ln of the stage fractions of one element at ``x = ln n_e`` into ``out[f:f+n]``."""
    m = -np.inf
    for k in range(n):
        t = C[f + k] - k * x
        if t > m:
            m = t
    s0 = 0.0
    for k in range(n):
        s0 += math.exp(C[f + k] - k * x - m)
    lns = math.log(s0)
    for k in range(n):
        out[f + k] = C[f + k] - k * x - m - lns
