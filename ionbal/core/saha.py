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
def saha_base(T):
    """``(base, beta)``: ln(2 (2 pi m_e k T / h^2)^{3/2}) and 1 / kT [eV^-1]."""
    return LN2 + LN_SAHA_CONST + 1.5 * math.log(T), 1.0 / (K_B_EV * T)


@jit
def element_log_weights(e, base, beta, i, w, elem_first, elem_n, stage_chi, stage_row, stage_lnu_const, lnU,
                        out):
    """Fill ``out[first:first+n]`` with the cumulative log Saha weights of element ``e``.

    Tabulated partition functions occupy the leading stages of an element
    (the packer guarantees it); past them every ln U is a constant, and the
    recurrence runs without branches.
    """
    f = elem_first[e]
    n = elem_n[e]
    out[f] = 0.0
    lnu_prev = stage_lnu(f, i, w, stage_row, stage_lnu_const, lnU)
    k = 1
    while k < n and (stage_row[f + k] >= 0 or stage_row[f + k - 1] >= 0):
        s = f + k
        lnu_s = stage_lnu(s, i, w, stage_row, stage_lnu_const, lnU)
        out[s] = out[s - 1] + base + (lnu_s - lnu_prev) - stage_chi[s - 1] * beta
        lnu_prev = lnu_s
        k += 1
    acc = out[f + k - 1]
    for s in range(f + k, f + n):
        acc += base + (stage_lnu_const[s] - stage_lnu_const[s - 1]) - stage_chi[s - 1] * beta
        out[s] = acc


@jit
def log_weights(T, elem_first, elem_n, stage_chi, stage_row, stage_lnu_const, lnU, lt0, dlt, out):
    """Cumulative log Saha weights ``C`` of every stage of every element at T."""
    i, w = table_position(T, lt0, dlt, lnU.shape[1])
    base, beta = saha_base(T)
    for e in range(elem_first.size):
        element_log_weights(e, base, beta, i, w, elem_first, elem_n, stage_chi, stage_row, stage_lnu_const,
                            lnU, out)


@jit
def closed_log_weights(T, mix, C):
    """Log Saha weights of every stage at T in closed form (fields built by :func:`ionbal.core.bundle.closed_form_fields`).

    ``C[s] = k base - X_s / kT + ln U_s``: one branch-free vector loop over the
    stages (no recurrence), then the tabulated ln U of the few stages that have
    a row.  Equal to :func:`log_weights` up to a constant per element (its
    first stage's ln U), which cancels in every fraction and moment.
    """
    lnU = mix.lnU
    i, w = table_position(T, mix.lt0, mix.dlt, lnU.shape[1])
    base, beta = saha_base(T)
    sk = mix.stage_k
    xc = mix.stage_xcum
    fix = mix.stage_lnu_fix
    for s in range(C.size):
        C[s] = sk[s] * base - xc[s] * beta + fix[s]
    tab_stage = mix.tab_stage
    tab_row = mix.tab_row
    for j in range(tab_stage.size):
        r = tab_row[j]
        C[tab_stage[j]] += (1.0 - w) * lnU[r, i] + w * lnU[r, i + 1]


@jit
def find_peak(C, f, n, x, kp0):
    """Most populated stage position of one element at ``x``, and its log weight.

    ``kp0 < 0``: scan every stage.  Otherwise climb from ``kp0``: the log
    populations ``C_k - k x`` are concave in ``k`` up to small wiggles of the
    partition-function ratios (ionization energies grow with charge), so the
    climb ends at the maximum of the populated region.
    """
    if kp0 < 0:
        m = -np.inf
        kp = 0
        for k in range(n):
            t = C[f + k] - k * x
            if t > m:
                m = t
                kp = k
        return kp, m
    kp = min(kp0, n - 1)
    m = C[f + kp] - kp * x
    while kp + 1 < n:
        t = C[f + kp + 1] - (kp + 1) * x
        if t > m:
            kp += 1
            m = t
        else:
            break
    while kp > 0:
        t = C[f + kp - 1] - (kp - 1) * x
        if t > m:
            kp -= 1
            m = t
        else:
            break
    return kp, m


@jit
def peak_guess(C, f, n, x):
    """First stage position ``k`` of an element with ``C_{k+1} - C_k - x < 0`` (bisection), else ``n - 1``.

    The log-population steps ``C_{k+1} - C_k - x`` fall with k (ionization energies grow with
    charge), so this is the most populated stage up to the small wiggles of the partition-function
    ratios; :func:`find_peak` climbs from it to the maximum.  ~log2(n) comparisons instead of n.
    """
    lo = 0
    hi = n - 1
    while lo < hi:
        mid = (lo + hi) // 2
        if C[f + mid + 1] - C[f + mid] - x < 0.0:
            hi = mid
        else:
            lo = mid + 1
    return lo


@jit
def populated_window(C, f, n, q0, x, kp0, gas_cut=math.inf):
    """The stages of one element that matter at ``x = ln n_e``: ``(kp, m, lo, hi)``.

    ``kp`` is the most populated stage position and ``m`` its log weight
    ``C_kp - kp x``; stages ``lo..hi`` lie within ``CUT`` (in ln) of the peak,
    walking outwards from it -- except that a neutral element keeps its ions
    down to ``CUT`` below the first ion, since they carry its charge however
    rare they are, and hydrogen keeps all three stages.  A caller that knows that a stage
    more than ``gas_cut`` below the peak is negligible against the whole gas (an
    abundance-aware cut, see :func:`.thermo.thermo_point`; default: no such cut) drops it, the
    ions of a neutral element included; the peak is always kept.
    """
    kp, m = find_peak(C, f, n, x, kp0)
    # the populated window: walk outwards from the peak until CUT below it
    cut = min(CUT, gas_cut)
    lo = kp
    while lo > 0 and C[f + lo - 1] - (lo - 1) * x - m >= -cut:
        lo -= 1
    hi = kp
    while hi + 1 < n and C[f + hi + 1] - (hi + 1) * x - m >= -cut:
        hi += 1
    if q0 < 0:
        # hydrogen (H-, H I, H II): in cool gas both charged stages may lie far below the
        # neutral peak and still carry the charge that matters; sum every stage
        lo = 0
        hi = n - 1
    elif kp == 0 and n > 1:
        # neutral peak: the element's charge is carried by the ions, however far below the
        # peak they lie; keep them down to CUT below the first ion (k = 1)
        t1 = C[f + 1] - x - m
        floor = max(t1 - CUT, -gas_cut)
        hi = 1 if t1 >= -gas_cut else 0
        while hi + 1 < n and C[f + hi + 1] - (hi + 1) * x - m >= floor:
            hi += 1
    return kp, m, lo, hi


@jit
def element_moments(C, f, n, q0, x, kp0):
    """Charge moments of one element at ``x = ln n_e``.

    Returns ``(pos, dpos, neg, dneg, kp)``: the mean positive charge and the
    mean negative charge (H-) of the element's nuclei, their derivatives with
    respect to ``x``, and the most populated stage position (a starting point
    for the next call, see :func:`find_peak`).  With ``f_k ~ exp(C_k - k x)``,
    ``d f_k / dx = -(k - <k>) f_k``.  Only the stages of
    :func:`populated_window` are summed; every sum is taken relative to the peak, and positive and negative parts are kept apart, so
    that nothing is lost to round-off when they nearly cancel (cool, dense gas
    where n(H-) rivals the positive ions).
    """
    kp, m, lo, hi = populated_window(C, f, n, q0, x, kp0)
    s0 = 0.0
    s1 = 0.0
    s2 = 0.0
    sp = 0.0
    spd = 0.0
    sn = 0.0
    snd = 0.0
    for k in range(lo, hi + 1):
        wt = math.exp(C[f + k] - k * x - m)
        d = k - kp
        s0 += wt
        s1 += wt * d
        s2 += wt * d * d
        if q0 < 0:
            q = q0 + k
            if q > 0:
                sp += q * wt
                spd += q * d * wt
            elif q < 0:
                sn -= q * wt
                snd -= q * d * wt
    mean_d = s1 / s0
    if q0 < 0:
        pos = sp / s0
        dpos = -(spd - mean_d * sp) / s0
        neg = sn / s0
        dneg = -(snd - mean_d * sn) / s0
    else:
        var = s2 / s0 - mean_d * mean_d
        if var < 0.0:
            var = 0.0
        pos = (q0 + kp) + mean_d
        dpos = -var
        neg = 0.0
        dneg = 0.0
    return pos, dpos, neg, dneg, kp


@jit
def charge_moments(C, x, elem_w, elem_first, elem_n, elem_q0, kpk):
    """Positive and negative charge per nucleus and their derivatives in ``x = ln n_e``.

    Returns ``(Qpos, Qneg, dQpos, dQneg)`` with ``Qpos = sum_e w_e <q>_+``
    (positive ions) and ``Qneg = sum_e w_e <q>_-`` (H-), so that charge
    conservation reads ``n_e + n_nuc Qneg = n_nuc Qpos``.  ``kpk`` holds each
    element's peak stage from the previous call (-1: unknown) and is updated.
    """
    Qpos = 0.0
    Qneg = 0.0
    dQpos = 0.0
    dQneg = 0.0
    for e in range(elem_w.size):
        pos, dpos, neg, dneg, kp = element_moments(C, elem_first[e], elem_n[e], elem_q0[e], x, kpk[e])
        kpk[e] = kp
        we = elem_w[e]
        Qpos += we * pos
        dQpos += we * dpos
        Qneg += we * neg
        dQneg += we * dneg
    return Qpos, Qneg, dQpos, dQneg


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


@jit
def charge_power_table(n):
    """``q^(5/3)`` for ``q = 0 .. n - 1`` (the Coulomb-coupling weight of a charge, one ``pow`` each)."""
    out = np.empty(n)
    for q in range(n):
        out[q] = q ** (5.0 / 3.0)
    return out


@jit
def element_charge_powers(C, f, n, q0, x, q53):
    """Per nucleus of one element: ``(sum_k f_k q_k^2, sum_{q>0} f_k q_k^{5/3}, sum_{q>0} f_k, m, ln s)``.

    The moments the plasma-validity parameters need (Debye length, Coulomb
    coupling), summed over :func:`populated_window`; ``q53`` is
    :func:`charge_power_table`.  ``m`` (the peak log weight) and ``ln s`` (the
    log of the window sum relative to it) normalise the stage fractions:
    ``ln f_k = C_k - k x - m - ln s``; the stages left out of the window weigh
    below ``e^-CUT`` of the peak, far below round-off of the sum.
    """
    kp, m, lo, hi = populated_window(C, f, n, q0, x, peak_guess(C, f, n, x))
    s0 = 0.0
    sq2 = 0.0
    sq53 = 0.0
    spos = 0.0
    for k in range(lo, hi + 1):
        wt = math.exp(C[f + k] - k * x - m)
        q = q0 + k
        s0 += wt
        sq2 += wt * q * q
        if q > 0:
            sq53 += wt * q53[q]
            spos += wt
    return sq2 / s0, sq53 / s0, spos / s0, m, math.log(s0)


#: a cached window is re-based (fresh exps, new window) once ``|x - x0|`` times the largest
#: stage distance from its peak exceeds this [ln]: the stages left out at ``x0`` (below -CUT)
#: then stay below -(CUT - REBASE) ~ 6e-19 of the peak, and no power overflows
REBASE = 4.0


@jit
def window_setup(C, f, n, q0, x, kp0, A):
    """Populated window of one element at ``x`` with its weights ``A[f+k] = exp(C_k - k x - m)``.

    Returns ``(kp, lo, hi)`` (see :func:`populated_window`); later evaluations
    at a nearby ``x'`` reuse ``A`` through :func:`window_moments` with
    ``z = exp(-(x' - x))``, one multiply per stage instead of one ``exp``.
    """
    kp, m, lo, hi = populated_window(C, f, n, q0, x, kp0)
    for k in range(lo, hi + 1):
        A[f + k] = math.exp(C[f + k] - k * x - m)
    return kp, lo, hi


@jit
def window_moments(A, f, q0, kp, lo, hi, z, iz):
    """Charge moments of one element from cached window weights ``A_k z^(k - kp)``.

    ``z = exp(-(x - x0))`` with ``x0`` where :func:`window_setup` filled ``A``
    (``z = iz = 1`` at ``x0`` itself: the multiplies are then exact).  Returns
    ``(pos, dpos, neg, dneg)`` as :func:`element_moments`; sums run outwards
    from the peak, relative to it.
    """
    s0 = A[f + kp]
    s1 = 0.0
    s2 = 0.0
    sp = 0.0
    spd = 0.0
    sn = 0.0
    snd = 0.0
    if q0 < 0:
        q = q0 + kp
        if q > 0:
            sp += q * s0
        elif q < 0:
            sn -= q * s0
    p = 1.0
    for k in range(kp + 1, hi + 1):
        p *= z
        wt = A[f + k] * p
        d = k - kp
        s0 += wt
        s1 += wt * d
        s2 += wt * d * d
        if q0 < 0:
            q = q0 + k
            if q > 0:
                sp += q * wt
                spd += q * d * wt
            elif q < 0:
                sn -= q * wt
                snd -= q * d * wt
    p = 1.0
    for k in range(kp - 1, lo - 1, -1):
        p *= iz
        wt = A[f + k] * p
        d = k - kp
        s0 += wt
        s1 += wt * d
        s2 += wt * d * d
        if q0 < 0:
            q = q0 + k
            if q > 0:
                sp += q * wt
                spd += q * d * wt
            elif q < 0:
                sn -= q * wt
                snd -= q * d * wt
    mean_d = s1 / s0
    if q0 < 0:
        return sp / s0, -(spd - mean_d * sp) / s0, sn / s0, -(snd - mean_d * sn) / s0
    var = s2 / s0 - mean_d * mean_d
    if var < 0.0:
        var = 0.0
    return (q0 + kp) + mean_d, -var, 0.0, 0.0


@jit
def cached_charge_moments(C, x, elem_w, elem_first, elem_n, elem_q0, kpk, wlo, whi, wx0, A):
    """:func:`charge_moments` with each element's window weights kept between calls.

    Per element, ``kpk``/``wlo``/``whi``/``wx0`` hold the window and the ``x0``
    of the cached weights in ``A`` (``kpk[e] < 0``: none yet, the first call
    scans every stage).  An element whose window is still valid at ``x``
    (``|x - x0| * max distance from its peak <= REBASE``) costs one multiply
    per stage; otherwise it is re-based at ``x`` (fresh exps, new window,
    peak climbed from the old one).  ``z`` is computed once per distinct
    ``x0`` in a row, so an evaluation costs a handful of exps, not one per stage.
    """
    Qpos = 0.0
    Qneg = 0.0
    dQpos = 0.0
    dQneg = 0.0
    zx0 = np.nan
    z = 1.0
    iz = 1.0
    for e in range(elem_w.size):
        f = elem_first[e]
        n = elem_n[e]
        kp = kpk[e]
        q0 = elem_q0[e]
        if kp >= 0:
            dist = kp if kp > n - 1 - kp else n - 1 - kp
            if abs(x - wx0[e]) * dist > REBASE:
                kp = -2 - kp  # re-base, climbing from the old peak
        if kp < 0:
            kp, lo, hi = window_setup(C, f, n, q0, x, -1 if kp == -1 else -2 - kp, A)
            kpk[e] = kp
            wlo[e] = lo
            whi[e] = hi
            wx0[e] = x
            pos, dpos, neg, dneg = window_moments(A, f, q0, kp, lo, hi, 1.0, 1.0)
        else:
            x0 = wx0[e]
            if not (x0 == zx0):
                zx0 = x0
                z = math.exp(x0 - x)
                iz = 1.0 / z
            pos, dpos, neg, dneg = window_moments(A, f, q0, kp, wlo[e], whi[e], z, iz)
        we = elem_w[e]
        Qpos += we * pos
        dQpos += we * dpos
        Qneg += we * neg
        dQneg += we * dneg
    return Qpos, Qneg, dQpos, dQneg


@jit
def dlnu_check(n_stage, n_points, dl_stage, dl_val):
    """True when the ln U corrections are usable: stage indices in range, ``dl_val`` of shape (n_points, k)."""
    if dl_val.shape[0] != n_points or dl_val.shape[1] != dl_stage.size:
        return False
    for j in range(dl_stage.size):
        if dl_stage[j] < 0 or dl_stage[j] >= n_stage:
            return False
    return True


@jit
def dlnu_apply(C, dl_stage, dl_row, saved):
    """Add the ln U corrections ``dl_row`` of stages ``dl_stage`` to the log weights ``C``.

    A correction to ln U of stage ``s`` multiplies its population by
    ``exp(dl)``: ``C[s] += dl`` (fractions are unchanged by a common shift of
    an element's ``C``, so the first stage needs no special case).  The old
    values go to ``saved`` for :func:`dlnu_restore`.  Nothing is done for k = 0.
    """
    for j in range(dl_stage.size):
        s = dl_stage[j]
        saved[j] = C[s]
        C[s] += dl_row[j]


@jit
def dlnu_restore(C, dl_stage, saved):
    """Undo :func:`dlnu_apply` exactly (reverse order, so repeated stages restore too)."""
    for j in range(dl_stage.size - 1, -1, -1):
        C[dl_stage[j]] = saved[j]
