"""Plain numpy + scipy reference for the joint molecular + ionization equilibrium (independent of the kernels).

Every density is rebuilt from the packed data (partition functions, ionization energies) and the
tabulated equilibrium constants (:func:`ionbal.data.molecules.log10_equilibrium_constant`, numpy):
Saha stages relative to each element's neutral atom, molecules from their dissociation reactions
(Barklem & Collet 2016 define the molecular ions as e.g. CO+ -> C+ + O), and the conservation
laws are evaluated as relative residuals, in extended precision (``numpy.longdouble``): at 1e6 K a
heavy element's neutral atom is ~e^-2000 of its nuclei and its highest stage e^+2000 above the neutral,
so a float64 evaluation of exp(ln n_neutral + ln(n_q/n_neutral)) alone would carry a round-off of
~2000 eps ~ 5e-13 per term, the size of the residuals it is meant to measure.  :func:`reference_solve` solves them with
``scipy.optimize.root`` from a given start.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import constants as sc
from scipy.optimize import root

from ionbal.data.molecules import log10_equilibrium_constant, molecule_table

K_B = sc.k * 1e7
K_B_EV = sc.k / sc.e
SAHA = 1.5 * math.log(2.0 * math.pi * sc.m_e * 1e3 * K_B / (sc.h * 1e7) ** 2)
LD = np.longdouble


def stage_log_ratios(packed, T):
    """Per element: charges q and ln(n_q / n_neutral) at n_e = 1 cm^-3 (numpy, every stage)."""
    lt = math.log10(T)
    grid = packed.lt0 + packed.dlt * np.arange(packed.lnU.shape[1])
    # every tabulated row at once: the same linear interpolation as np.interp on each row
    i = int(np.clip(np.searchsorted(grid, lt, side="right") - 1, 0, grid.size - 2))
    w = (lt - grid[i]) / (grid[i + 1] - grid[i])
    rows_at_t = packed.lnU[:, i] + w * (packed.lnU[:, i + 1] - packed.lnU[:, i])
    rows = np.asarray(packed.stage_row)
    lnu_all = np.where(rows >= 0, rows_at_t[np.maximum(rows, 0)], packed.stage_lnu_const).astype(LD)
    chi_all = np.asarray(packed.stage_chi).astype(LD)
    base = np.log(LD(2.0)) + LD(SAHA) + LD(1.5) * np.log(LD(T))
    beta = LD(1.0) / (LD(K_B_EV) * LD(T))
    out = []
    for e in range(packed.elem_w.size):
        f, n, q0 = int(packed.elem_first[e]), int(packed.elem_n[e]), int(packed.elem_q0[e])
        lnu = lnu_all[f:f + n]
        steps = base + np.diff(lnu) - chi_all[f:f + n - 1] * beta
        C = np.concatenate([[LD(0.0)], np.cumsum(steps)])
        kn = -q0
        out.append(((np.arange(n) - kn).astype(LD), C - C[kn]))
    return out


class Reference:
    """Residuals of the equilibrium at one temperature for the molecules of ``pm``."""

    def __init__(self, packed, pm, T):
        self.packed, self.pm, self.T = packed, pm, T
        self.kT = LD(K_B) * LD(T)
        self.stages = stage_log_ratios(packed, T)
        tab = molecule_table()
        zs = [int(z) for z in packed.atomic_numbers]
        self.e_of_z = {z: e for e, z in enumerate(zs)}
        self.formers = [self.e_of_z[z] for z in pm.formers]
        self.mols = []
        for m in pm.molecules:
            i = tab.molecules.index(m)
            lnkp = np.log(LD(10.0)) * LD(float(log10_equilibrium_constant(m, T)))
            comp = [(self.e_of_z[z], c) for z, c in m.composition]
            ion = None
            if tab.ion_z[i]:
                e = self.e_of_z[int(tab.ion_z[i])]
                q, lr = self.stages[e]
                ion = lr[list(q).index(int(tab.ion_q[i]))]
            const = -lnkp + (m.n_atoms - 1) * np.log(self.kT) + (ion if ion is not None else LD(0.0))
            self.mols.append((comp, m.charge, const))

    def densities(self, y_formers, x, L):
        """Free atoms per element (all stages), stage densities, molecule densities."""
        p = self.packed
        y_formers, x, L = np.asarray(y_formers, dtype=LD), LD(x), LD(L)
        N = np.exp(L)
        lnn0 = np.empty(p.elem_w.size, dtype=LD)
        fset = dict(zip(self.formers, range(len(self.formers))))
        for e, (q, lr) in enumerate(self.stages):
            if e in fset:
                lnn0[e] = y_formers[fset[e]]
            else:
                t = lr - q * x
                lnn0[e] = np.log(LD(p.elem_w[e]) * N) - (t.max() + np.log(np.exp(t - t.max()).sum()))
        stage = [np.exp(lnn0[e] + lr - q * x) for e, (q, lr) in enumerate(self.stages)]
        lnm = np.array([sum(c * lnn0[e] for e, c in comp) + const - qm * x for comp, qm, const in self.mols], dtype=LD)
        return lnn0, stage, np.exp(lnm)

    def residuals(self, y_formers, x, L, mode, value):
        """Relative residuals: every element, charge, and the state equation."""
        p = self.packed
        lnn0, stage, nm = self.densities(y_formers, x, L)
        N = np.exp(LD(L))
        budget = np.array([s.sum() for s in stage], dtype=LD)
        for (comp, qm, const), n in zip(self.mols, nm):
            for e, c in comp:
                budget[e] += c * n
        r_el = budget / (p.elem_w.astype(LD) * N) - 1.0
        pos = sum((np.where(q > 0, q, 0) * s).sum() for (q, _), s in zip(self.stages, stage))
        neg = sum((np.where(q < 0, -q, 0) * s).sum() for (q, _), s in zip(self.stages, stage))
        for (comp, qm, const), n in zip(self.mols, nm):
            if qm > 0:
                pos += qm * n
            elif qm < 0:
                neg -= qm * n
        ne = np.exp(LD(x))
        r_q = (ne + neg) / pos - 1.0
        particles = sum(s.sum() for s in stage) + nm.sum() + ne
        if mode == "gas_pressure":
            r_s = particles * self.kT / LD(value) - 1.0
        elif mode == "nuclei_density":
            r_s = N / LD(value) - 1.0
        else:
            r_s = ne * self.kT / LD(value) - 1.0
        return r_el.astype(float), float(r_q), float(r_s)


def reference_solve(packed, pm, T, mode, value, y0, x0, L0):
    """Solve with scipy.optimize.root (hybr) from the start ``(y0, x0, L0)``; returns (y, x, L, ok)."""
    ref = Reference(packed, pm, T)
    J = len(ref.formers)

    def unpack(z):
        y = z[:J]
        if mode == "gas_pressure":
            return y, z[J], z[J + 1]
        if mode == "nuclei_density":
            return y, z[J], math.log(value)
        return y, math.log(value / ref.kT), z[J]

    def fun(z):
        y, x, L = unpack(z)
        r_el, r_q, r_s = ref.residuals(y, x, L, mode, value)
        out = [np.log1p(r_el[ref.formers]), [math.log1p(r_q)]]
        if mode == "gas_pressure":
            out.append([math.log1p(r_s)])
        return np.concatenate(out)

    if mode == "gas_pressure":
        z0 = np.concatenate([y0, [x0, L0]])
    elif mode == "nuclei_density":
        z0 = np.concatenate([y0, [x0]])
    else:
        z0 = np.concatenate([y0, [L0]])
    sol = root(fun, z0, method="hybr", options={"xtol": 1e-14})
    y, x, L = unpack(sol.x)
    return y, x, L, bool(np.max(np.abs(fun(sol.x))) < 1e-12)
