"""A slow, plain numpy + scipy reference implementation of the ionization balance.

Written independently of :mod:`ionbal.core`: populations from the Saha
equation built stage by stage with :func:`numpy.interp` partition functions and
:func:`scipy.special.logsumexp`, and charge conservation solved per point with
:func:`scipy.optimize.brentq`.  It shares only the *atomic data* (through the
packed arrays) so that the comparison tests the numerics, not the tables.
"""

from __future__ import annotations

import numpy as np
from scipy import constants as c
from scipy.optimize import brentq
from scipy.special import logsumexp

K_B = c.k * 1e7  # erg/K
K_EV = c.k / c.e  # eV/K
SAHA = (2 * np.pi * c.m_e * 1e3 * K_B / (c.h * 1e7) ** 2) ** 1.5  # cm^-3 K^-3/2


def element_log_populations(packed, T):
    """Per element: (charges, ln(n_j / n_first)) as a function returning arrays at ln n_e."""
    log10_grid = packed.lt0 + packed.dlt * np.arange(packed.lnU.shape[1])
    lnu = np.where(packed.stage_row >= 0,
                   [np.interp(np.log10(T), log10_grid, packed.lnU[r]) if r >= 0 else 0.0
                    for r in packed.stage_row],
                   packed.stage_lnu_const)
    out = []
    for e in range(packed.elem_w.size):
        f, n, q0 = int(packed.elem_first[e]), int(packed.elem_n[e]), int(packed.elem_q0[e])
        lns = [np.log(2.0 * SAHA * T**1.5) + lnu[f + k + 1] - lnu[f + k] - packed.stage_chi[f + k] / (K_EV * T)
               for k in range(n - 1)]
        cum = np.concatenate([[0.0], np.cumsum(lns)])
        out.append((np.arange(q0, q0 + n, dtype=float), cum))
    return out


def charge_per_nucleus(pops, weights, lnne):
    """Net charge per nucleus, and the positive part, at ln n_e."""
    q = qpos = 0.0
    for (charges, cum), w in zip(pops, weights):
        k = np.arange(charges.size)
        lp = cum - k * lnne
        lf = lp - logsumexp(lp)
        fr = np.exp(lf)
        q += w * np.dot(fr, charges)
        qpos += w * np.dot(fr, np.clip(charges, 0, None))
    return q, qpos


def solve_reference(packed, T, gas_pressure=None, nuclei_density=None, electron_pressure=None):
    """Return (n_e, n_nuclei) at one point."""
    pops = element_log_populations(packed, T)
    w = packed.elem_w
    if electron_pressure is not None:
        ne = electron_pressure / (K_B * T)
        q, _ = charge_per_nucleus(pops, w, np.log(ne))
        return ne, ne / q
    if gas_pressure is not None:
        N = gas_pressure / (K_B * T)

        def nuc(x):
            return N - np.exp(x)

        hi = np.log(N * packed.q_max / (1 + packed.q_max))
    else:
        def nuc(x):
            return nuclei_density

        hi = np.log(nuclei_density * packed.q_max)

    def h(x):
        q, _ = charge_per_nucleus(pops, w, x)
        n = nuc(x)
        if q <= 0 or n <= 0:
            return -1e3
        return np.log(n * q) - x

    lo = hi - 1.0
    while h(lo) <= 0:
        lo -= 2 * (hi - lo)
    x = brentq(h, lo, hi, xtol=1e-15, rtol=1e-15, maxiter=500)
    return np.exp(x), nuc(x)
