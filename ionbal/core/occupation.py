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
from .saha import stage_lnu, table_position
from .constants import K_B_EV

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
def stage_dlnu(j, T, beta, ne, n_neutral, lnu_tab, g_start, g_nstar, g_lng, g_energy, st_z):
    """d ln U of treated stage ``j`` (groups ``g_start[j]:g_start[j+1]``, descending n*)."""
    z = st_z[j]
    s_diss = 0.0
    for g in range(g_start[j], g_start[j + 1]):
        w = occupation(g_nstar[g], z, ne, n_neutral, T)
        if 1.0 - w < W_STOP:
            break
        s_diss += (1.0 - w) * math.exp(g_lng[g] - g_energy[g] * beta - lnu_tab)
    if s_diss == 0.0:
        return 0.0
    if s_diss < 0.5:
        return math.log1p(-s_diss)
    # strongly dissolved: the ratio of the grouped sums (positive however dense the gas)
    num = 0.0
    den = 0.0
    for g in range(g_start[j], g_start[j + 1]):
        b = math.exp(g_lng[g] - g_energy[g] * beta - lnu_tab)
        num += occupation(g_nstar[g], z, ne, n_neutral, T) * b
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
        beta = 1.0 / (K_B_EV * Tp)
        for j in range(k):
            s = st_stage[j]
            lnu_tab = stage_lnu(s, i, w, mix.stage_row, mix.stage_lnu_const, mix.lnU)
            out[p, j] = stage_dlnu(j, Tp, beta, ne, nn, lnu_tab, g_start, g_nstar, g_lng, g_energy, st_z)
