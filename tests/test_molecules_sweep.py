"""Convergence of the joint molecular + ionization solve over ionbal's whole domain (issue 10).

1,000-1e6 K x P_gas 1e-6-1e12 dyn cm^-2, every state input (the other three taken from the
gas-pressure solution, so every state is physical), for AGSS09, [M/H] = +1 and -5, C/O = 2 and a
hydrogen-free gas.  Every state must converge, and every conservation equation (each element's
nuclei, charge, the state input) is recomputed by the plain numpy reference
(``tests/molecules_reference.py``) at the solution: worst relative residual <= 1e-12.
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np
import pytest

from ionbal import _problems
from ionbal.chemistry import solve_chemistry
from ionbal.core.constants import K_B
from ionbal.data.pack import pack

sys.path.insert(0, str(Path(__file__).resolve().parent))
from molecules_reference import Reference  # noqa: E402

LIMIT = 1e-12
_M = _problems.mixtures()
SOLAR = _M["AGSS09"]
MIXTURES = {
    "AGSS09": SOLAR,
    "[M/H]=+1": _M["[M/H]=+1"],
    "[M/H]=-5": _M["[M/H]=-5"],
    "C/O=2": SOLAR.with_abundances(C=SOLAR["O"] + math.log10(2.0)),
    "hydrogen-free He-C-O": _M["hydrogen-free He-C-O"],
}
INPUTS = ("gas_pressure", "nuclei_density", "hydrogen_density", "mass_density", "electron_pressure")


def _sweep(name, n, seed):
    mix = MIXTURES[name]
    p = pack(mix)
    T, P = _problems.random_states(n, seed)
    base = solve_chemistry(p, T, state="gas_pressure", value=P)
    N = np.exp(base.ln_nuclei_density)
    values = {"gas_pressure": P, "nuclei_density": N, "hydrogen_density": N * p.hydrogen_weight,
              "mass_density": N * p.mean_mass, "electron_pressure": np.exp(base.ln_electron_density) * K_B * T}
    # the reference's Saha ratios and constants depend on T alone: one per state, for every input
    refs = [Reference(p, base.molecules, T[i]) for i in range(n)]
    report = {}
    for state in INPUTS:
        if state == "hydrogen_density" and p.hydrogen_weight == 0.0:
            continue
        s = base if state == "gas_pressure" else solve_chemistry(p, T, state=state, value=values[state])
        bad = np.flatnonzero(s.status != 0)
        assert bad.size == 0, (name, state, T[bad][:5], P[bad][:5], s.status[bad][:5])
        pm = s.molecules
        fe = [p.element_index(int(z)) for z in pm.formers]
        mode = {"gas_pressure": "gas_pressure", "electron_pressure": "electron_pressure"}.get(state, "nuclei_density")
        val = values[state] / (p.hydrogen_weight if state == "hydrogen_density" else
                               p.mean_mass if state == "mass_density" else 1.0)
        worst = 0.0
        for i in range(n):
            r_el, r_q, r_s = refs[i].residuals(s.ln_free_neutral_atoms[i, fe], s.ln_electron_density[i],
                                           s.ln_nuclei_density[i], mode, val[i])
            worst = max(worst, float(np.max(np.abs(r_el))), abs(r_q), abs(r_s))
        report[state] = (worst, int(s.iterations.max()), float(s.iterations.mean()))
        assert worst <= LIMIT, (name, state, worst)
    return report


@pytest.mark.parametrize("name", list(MIXTURES))
def test_sweep_small(name):
    _sweep(name, 12, seed=11)


@pytest.mark.slow
@pytest.mark.parametrize("name", list(MIXTURES))
def test_sweep_slow(name):
    rep = _sweep(name, 1500, seed=2026)
    print(f"\n{name}: " + "; ".join(f"{k}: worst {w:.1e}, iterations max {m} mean {a:.1f}"
                                      for k, (w, m, a) in rep.items()))
