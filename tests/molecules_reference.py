"""Plain numpy + scipy reference for the joint molecular + ionization equilibrium (independent of the kernels).

Every density is rebuilt from the packed data (partition functions, ionization energies) and the
tabulated equilibrium constants (:func:`ionbal.data.molecules.log10_equilibrium_constant`, numpy):
Saha stages relative to each element's neutral atom, molecules from their dissociation reactions
(Barklem & Collet 2016 define the molecular ions as e.g. CO+ -> C+ + O), and the conservation
laws are evaluated as relative residuals.  :func:`reference_solve` solves them with
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


def stage_log_ratios(packed, T):
    """Per element: charges q and ln(n_q / n_neutral) at n_e = 1 cm^-3 (numpy, every stage)."""
    lt = math.log10(T)
    grid = packed.lt0 + packed.dlt * np.arange(packed.lnU.shape[1])
    out = []
    for e in range(packed.elem_w.size):
        f, n, q0 = int(packed.elem_first[e]), int(packed.elem_n[e]), int(packed.elem_q0[e])
        lnu = np.array([np.interp(lt, grid, packed.lnU[r]) if r >= 0 else c
                        for r, c in zip(packed.stage_row[f:f + n], packed.stage_lnu_const[f:f + n])])
        steps = math.log(2.0) + SAHA + 1.5 * math.log(T) + np.diff(lnu) - packed.stage_chi[f:f + n - 1] / (K_B_EV * T)
        C = np.concatenate([[0.0], np.cumsum(steps)])
        kn = -q0
        out.append((np.arange(n) - kn, C - C[kn]))
    return out


class Reference:
    """Residuals of the equilibrium at one temperature for the molecules of ``pm``."""

    def __init__(self, packed, pm, T):
        self.packed, self.pm, self.T = packed, pm, T
        self.kT = K_B * T
        self.stages = stage_log_ratios(packed, T)
        tab = molecule_table()
        zs = [int(z) for z in packed.atomic_numbers]
        self.e_of_z = {z: e for e, z in enumerate(zs)}
        self.formers = [self.e_of_z[z] for z in pm.formers]
        self.mols = []
        for m in pm.molecules:
            i = tab.molecules.index(m)
            lnkp = math.log(10.0) * float(log10_equilibrium_constant(m, T))
            comp = [(self.e_of_z[z], c) for z, c in m.composition]
            ion = None
            if tab.ion_z[i]:
                e = self.e_of_z[int(tab.ion_z[i])]
                q, lr = self.stages[e]
                ion = float(lr[list(q).index(int(tab.ion_q[i]))])
            const = -lnkp + (m.n_atoms - 1) * math.log(self.kT) + (ion or 0.0)
            self.mols.append((comp, m.charge, const))

    def densities(self, y_formers, x, L):
        """Free atoms per element (all stages), stage densities, molecule densities."""
        p = self.packed
        N = math.exp(L)
        lnn0 = np.empty(p.elem_w.size)
        fset = dict(zip(self.formers, range(len(self.formers))))
        for e, (q, lr) in enumerate(self.stages):
            if e in fset:
                lnn0[e] = y_formers[fset[e]]
            else:
                t = lr - q * x
                lnn0[e] = math.log(p.elem_w[e] * N) - (t.max() + math.log(np.exp(t - t.max()).sum()))
        stage = [np.exp(lnn0[e] + lr - q * x) for e, (q, lr) in enumerate(self.stages)]
        lnm = np.array([sum(c * lnn0[e] for e, c in comp) + const - qm * x for comp, qm, const in self.mols])
        return lnn0, stage, np.exp(lnm)

    def residuals(self, y_formers, x, L, mode, value):
        """Relative residuals: every element, charge, and the state equation."""
        p = self.packed
        lnn0, stage, nm = self.densities(y_formers, x, L)
        N = math.exp(L)
        budget = np.array([s.sum() for s in stage])
        for (comp, qm, const), n in zip(self.mols, nm):
            for e, c in comp:
                budget[e] += c * n
        r_el = budget / (p.elem_w * N) - 1.0
        pos = sum((np.where(q > 0, q, 0) * s).sum() for (q, _), s in zip(self.stages, stage))
        neg = sum((np.where(q < 0, -q, 0) * s).sum() for (q, _), s in zip(self.stages, stage))
        for (comp, qm, const), n in zip(self.mols, nm):
            if qm > 0:
                pos += qm * n
            elif qm < 0:
                neg -= qm * n
        ne = math.exp(x)
        r_q = (ne + neg) / pos - 1.0
        particles = sum(s.sum() for s in stage) + nm.sum() + ne
        if mode == "gas_pressure":
            r_s = particles * self.kT / value - 1.0
        elif mode == "nuclei_density":
            r_s = N / value - 1.0
        else:
            r_s = ne * self.kT / value - 1.0
        return r_el, r_q, r_s


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
