"""Occupation probabilities of bound levels in dense gas, and the ln U corrections they make.

Hummer & Mihalas (1988, ApJ 331, 794; "HM88") give every bound level i a
probability w_i of existing in the plasma; the partition function becomes

    U = sum_i w_i g_i exp(-E_i / kT),

and the Saha equation keeps its form.  Two factors, multiplied:

Neutral perturbers (excluded volume; HM88 sect. 4, hard spheres; form from memory)
    w_n = exp(-(4 pi / 3) N_0 (r_n + r_0)^3),   r_n = n*^2 a_0 / z,  r_0 = a_0,
    with N_0 the density of neutral perturbers (H I + He I), n* the effective
    quantum number and z the charge of the core the excited electron sees.
    For H I in its ground state this is (4 pi / 3) N_0 (2 a_0)^3, the parameter of
    the ``pressure_ionization`` validity flag.

Charged perturbers (microfield)
    The fit of Hubeny, Hummer & Lanz (1994, A&A 282, 151, their eqs. 4.1-4.5;
    numbers from memory, equation numbers not checked) to the HM88 Holtsmark
    microfield term (HM88 eq. 4.71) with the correlation (Debye-shielding)
    correction:

        w = f / (1 + f),
        f = 0.1402 (X + 4 Z_r a^3) beta^3 / (1 + 0.1285 X a^{3/2} beta^{3/2}),
        a = 0.09 n_e^{1/6} / T^{1/2},  X = (1 + a)^{3.15},  Z_r = 1 (protons),
        beta = 8.3e14 n_e^{-2/3} K_n z^3 / n*^4,
        K_n = 1 (n* <= 3),  16/3 n* / (n* + 1)^2 (n* > 3).

    At a = 0 the level n with w = 1/2 follows n^{7.5} ~ n_e^{-1}, the scaling of
    Inglis & Teller (1939, ApJ 90, 439).

Combination with the tabulated ln U (``ionbal.core.saha``): for every treated
stage the levels summed into its table column are grouped by effective quantum
number (``tables/level_groups.ecsv``); the correction is

    d ln U = ln(1 - sum_g (1 - w_g) g_g exp(-E_g / kT) / U_table(T)),

exactly 0 where no level is dissolved, so low-density answers do not move.  No
level beyond the table's is added (H I keeps n <= 17, the Inglis-Teller cut at
n_e = 1e14 that the table assumes).  Groups are held in descending n* and the
sum stops at the first group with 1 - w < :data:`W_STOP` (w grows as n* falls).
When the dissolved share exceeds 1/2 the ratio of the grouped sums is used
instead, which stays positive however dense the gas.
"""

from __future__ import annotations

import math

import numpy as np

from .config import jit, pjit, prange
from .constants import A_BOHR
from .constants import K_B_EV
from .saha import element_log_fractions, element_log_weights, saha_base, stage_lnu, table_position

#: groups with 1 - w below this end the sum (w only grows towards low n*)
W_STOP = 1e-15
_FOUR_PI_3 = 4.0 * math.pi / 3.0


@jit
def w_charged(nstar, z, ne, T):
    """Charged-perturber (microfield) occupation probability, fit of Hubeny, Hummer & Lanz 1994."""
    if not (ne > 0.0):
        return 1.0
    a = 0.09 * ne ** (1.0 / 6.0) / math.sqrt(T)
    X = (1.0 + a) ** 3.15
    if nstar <= 3.0:
        kn = 1.0
    else:
        kn = 16.0 / 3.0 * nstar / ((nstar + 1.0) * (nstar + 1.0))
    beta = 8.3e14 * ne ** (-2.0 / 3.0) * kn * z * z * z / (nstar * nstar * nstar * nstar)
    b3 = beta * beta * beta
    f = 0.1402 * (X + 4.0 * a * a * a) * b3 / (1.0 + 0.1285 * X * a ** 1.5 * beta ** 1.5)
    return f / (1.0 + f)


@jit
def w_neutral(nstar, z, n_neutral):
    """Neutral-perturber (excluded-volume) occupation probability, HM88 hard spheres."""
    r = nstar * nstar * A_BOHR / z + A_BOHR
    return math.exp(-_FOUR_PI_3 * n_neutral * r * r * r)


@jit
def occupation(nstar, z, ne, n_neutral, T):
    """Total occupation probability w = w_neutral * w_charged of a level."""
    return w_neutral(nstar, z, n_neutral) * w_charged(nstar, z, ne, T)


@jit
def microfield_constants(ne, T):
    """Per-point constants of :func:`w_charged`: ``(c_beta, c_num, c_den)``.

    ``beta = c_beta K_n z^3 / n*^4``, ``f = c_num beta^3 / (1 + c_den beta^{3/2})``.
    """
    a = 0.09 * ne ** (1.0 / 6.0) / math.sqrt(T)
    X = (1.0 + a) ** 3.15
    return 8.3e14 * ne ** (-2.0 / 3.0), 0.1402 * (X + 4.0 * a * a * a), 0.1285 * X * a * math.sqrt(a)


@jit
def one_minus_w(nstar, z, c_beta, c_num, c_den, v_neutral):
    """1 - w of a level from the per-point constants (``v_neutral = (4 pi / 3) N_0``)."""
    if nstar <= 3.0:
        kn = 1.0
    else:
        kn = 16.0 / 3.0 * nstar / ((nstar + 1.0) * (nstar + 1.0))
    n2 = nstar * nstar
    beta = c_beta * kn * z * z * z / (n2 * n2)
    f = c_num * beta * beta * beta / (1.0 + c_den * beta * math.sqrt(beta))
    r = n2 * A_BOHR / z + A_BOHR
    v = v_neutral * r * r * r
    # w = w_neutral * w_charged; 1 - w without cancellation
    return 1.0 / (1.0 + f) - math.expm1(-v) * f / (1.0 + f)


@jit
def stage_dlnu(j, beta_t, c_beta, c_num, c_den, v_neutral, lnu_tab, g_start, g_nstar, g_lng, g_energy, st_z):
    """d ln U of treated stage ``j`` (groups ``g_start[j]:g_start[j+1]``, descending n*)."""
    z = st_z[j]
    s_diss = 0.0
    for g in range(g_start[j], g_start[j + 1]):
        omw = one_minus_w(g_nstar[g], z, c_beta, c_num, c_den, v_neutral)
        if omw < W_STOP:
            break
        s_diss += omw * math.exp(g_lng[g] - g_energy[g] * beta_t - lnu_tab)
    if s_diss == 0.0:
        return 0.0
    if s_diss < 0.5:
        return math.log1p(-s_diss)
    # strongly dissolved: the ratio of the grouped sums (positive however dense the gas)
    num = 0.0
    den = 0.0
    for g in range(g_start[j], g_start[j + 1]):
        b = math.exp(g_lng[g] - g_energy[g] * beta_t - lnu_tab)
        num += (1.0 - one_minus_w(g_nstar[g], z, c_beta, c_num, c_den, v_neutral)) * b
        den += b
    if not (num > 0.0):
        return -745.0
    return math.log(num / den)


@pjit
def dlnu_many(T, ln_ne, ln_neutral, st_stage, g_start, g_nstar, g_lng, g_energy, st_z, mix, out):
    """d ln U of every treated stage at every point: ``out`` (n_points, n_treated).

    ``ln_ne`` and ``ln_neutral`` are ln of the electron and neutral-perturber
    densities [cm^-3]; non-finite inputs give 0 (no correction).
    """
    n = T.size
    k = st_stage.size
    n_t = mix.lnU.shape[1]
    for p in prange(n):
        Tp = T[p]
        if not (Tp > 0.0 and Tp < np.inf and abs(ln_ne[p]) < np.inf):
            for j in range(k):
                out[p, j] = 0.0
            continue
        ne = math.exp(ln_ne[p])
        nn = math.exp(ln_neutral[p]) if abs(ln_neutral[p]) < np.inf else 0.0
        i, w = table_position(Tp, mix.lt0, mix.dlt, n_t)
        beta_t = 1.0 / (K_B_EV * Tp)
        c_beta, c_num, c_den = microfield_constants(ne, Tp)
        v_neutral = _FOUR_PI_3 * nn
        for j in range(k):
            s = st_stage[j]
            lnu_tab = stage_lnu(s, i, w, mix.stage_row, mix.stage_lnu_const, mix.lnU)
            out[p, j] = stage_dlnu(j, beta_t, c_beta, c_num, c_den, v_neutral, lnu_tab, g_start, g_nstar, g_lng,
                                   g_energy, st_z)


@pjit
def neutral_density_many(T, x, ln_nuc, sel_elem, mix, dl_stage, dl_val, out):
    """ln of the density of neutral atoms of the elements ``sel_elem`` (H I + He I), with the ln U corrections.

    ``out[p]`` = ln sum_e w_e n_nuc f(neutral stage of e); the corrections of the
    stages of these elements are applied as in :func:`ionbal.core.solver.apply_dlnu`.
    """
    n = T.size
    n_stage = mix.stage_chi.size
    n_t = mix.lnU.shape[1]
    for p in prange(n):
        if not (T[p] > 0.0 and T[p] < np.inf and abs(x[p]) < np.inf and abs(ln_nuc[p]) < np.inf):
            out[p] = -np.inf
            continue
        C = np.empty(n_stage)
        row = np.empty(n_stage)
        i, w = table_position(T[p], mix.lt0, mix.dlt, n_t)
        base, beta = saha_base(T[p])
        tot = 0.0
        for jj in range(sel_elem.size):
            e = sel_elem[jj]
            f = mix.elem_first[e]
            ne_ = mix.elem_n[e]
            element_log_weights(e, base, beta, i, w, mix.elem_first, mix.elem_n, mix.stage_chi, mix.stage_row,
                                mix.stage_lnu_const, mix.lnU, C)
            for j in range(dl_stage.size):
                s = dl_stage[j]
                if s >= f and s < f + ne_:
                    C[s] += dl_val[p, j]
            element_log_fractions(C, f, ne_, x[p], row)
            tot += mix.elem_w[e] * math.exp(row[f - mix.elem_q0[e]])
        out[p] = ln_nuc[p] + math.log(tot) if tot > 0.0 else -np.inf
