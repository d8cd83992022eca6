"""What a user would write instead of ionbal: plain numpy Saha plus ``scipy.optimize.brentq`` per point.

Same physics and the same atomic data as ionbal (the packed arrays of
:func:`ionbal.data.pack.pack`: ionization energies, partition-function rows,
H-), written the way a competent scientist would with numpy and scipy:

* partition functions: ``np.interp`` of every tabulated ln U row in log10 T,
  vectorised over all states at once;
* per point: the cumulative log Saha weights of every stage as numpy
  expressions on a rectangular (element x stage) array padded past each
  element's last stage (``np.cumsum`` along the stages), and the charge per
  nucleus at ``x = ln n_e`` as a numpy log-sum-exp along the stages of every
  element at once;
* ``brentq`` on ``h(x) = ln(n_nuc Q(x)) - x`` between the full-ionization
  bound and a lower end found by stepping down.

Nothing here is jitted; it exists only to be timed against ionbal.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import constants as sc
from scipy.optimize import brentq

__all__ = ["BaselineSolver"]

K_B = sc.k * 1e7  # erg / K
K_B_EV = sc.k / sc.e  # eV / K
# ln(2 (2 pi m_e k / h^2)^{3/2}) in cgs (T^{3/2} added per point)
LN_SAHA = math.log(2.0 * (2.0 * math.pi * sc.m_e * 1e3 * K_B / (sc.h * 1e7) ** 2) ** 1.5)


class BaselineSolver:
    """Plain numpy + scipy solver for gas-pressure input, set up from a :class:`PackedMixture`."""

    def __init__(self, packed, xtol: float = 1e-13, rtol: float = 1e-15):
        self.p = packed
        self.xtol = xtol
        self.rtol = rtol
        # a rectangular (element, stage position) layout padded past each element's last stage
        n_el = packed.elem_w.size
        n_max = int(packed.elem_n.max())
        k = np.arange(n_max)
        self.valid = k[None, :] < packed.elem_n[:, None]
        self.idx = np.where(self.valid, packed.elem_first[:, None] + k[None, :], 0)  # flat stage index
        self.k = np.broadcast_to(k.astype(float), (n_el, n_max))
        self.charge = np.where(self.valid, packed.elem_q0[:, None] + k[None, :], 0).astype(float)
        # energy from the stage below: chi of stage (s - 1) at positions k >= 1
        chi = packed.stage_chi[self.idx[:, :-1]]
        self.chi_below = np.zeros((n_el, n_max))
        self.chi_below[:, 1:] = np.where(self.valid[:, 1:], chi, 0.0)
        self.tab = np.flatnonzero(packed.stage_row >= 0)
        self.log10_grid = packed.lt0 + packed.dlt * np.arange(packed.lnU.shape[1])

    def partition_functions(self, T: np.ndarray) -> np.ndarray:
        """ln U of every stage at every T, shape (n_points, n_stages): np.interp on each table row."""
        p = self.p
        lgT = np.log10(T)
        lnu = np.tile(p.stage_lnu_const, (T.size, 1))
        for s in self.tab:
            lnu[:, s] = np.interp(lgT, self.log10_grid, p.lnU[p.stage_row[s]])
        return lnu

    def log_weights(self, T: float, lnu: np.ndarray) -> np.ndarray:
        """Cumulative ln Saha weights C (n_elements, n_max) at T; C = 0 at each element's first stage."""
        u = lnu[self.idx]
        lns = np.zeros_like(u)
        lns[:, 1:] = LN_SAHA + 1.5 * math.log(T) + u[:, 1:] - u[:, :-1] - self.chi_below[:, 1:] / (K_B_EV * T)
        C = np.cumsum(lns, axis=1)
        C[~self.valid] = -np.inf  # padding: no population
        return C

    def net_charge(self, C: np.ndarray, x: float) -> float:
        """Net charge per nucleus (ions minus H-) at x = ln n_e: a log-sum-exp per element."""
        t = C - self.k * x
        e = np.exp(t - t.max(axis=1, keepdims=True))
        return float(np.dot(self.p.elem_w, (e * self.charge).sum(axis=1) / e.sum(axis=1)))

    def solve_point(self, T: float, P: float, lnu: np.ndarray) -> float:
        """ln n_e at one (T, P_gas)."""
        C = self.log_weights(T, lnu)
        lnN = math.log(P / (K_B * T))
        qm = self.p.q_max
        hi = lnN + math.log(qm / (1.0 + qm))

        def h(x):
            q = self.net_charge(C, x)
            nn = math.exp(lnN) - math.exp(x)
            if q <= 0.0 or nn <= 0.0:
                return -1e3
            return math.log(nn * q) - x

        if h(hi) >= 0.0:  # fully ionized to round-off
            return hi
        lo = hi - 1.0
        while h(lo) <= 0.0:
            lo -= 2.0 * (hi - lo)
        return brentq(h, lo, hi, xtol=self.xtol, rtol=self.rtol, maxiter=500)

    def solve(self, T: np.ndarray, P: np.ndarray) -> np.ndarray:
        """ln n_e at every state."""
        lnu = self.partition_functions(T)
        return np.array([self.solve_point(float(T[i]), float(P[i]), lnu[i]) for i in range(T.size)])
