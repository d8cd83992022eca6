"""Convergence everywhere: sweeps of random states over ionbal's whole domain, every input, extreme mixtures.

The domain (``ionbal._problems``): 1,000 K <= T <= 1e6 K with 1e-6 <= P_gas <= 1e12 dyn cm^-2, and
the ranges of the other three inputs that those gas pressures produce.  Every state must converge,
with the conservation laws checked independently of the solver:

* charge: ``|n_e + n_nuc Qneg - n_nuc Qpos| / (n_nuc Qpos)`` with the positive and negative charge
  per nucleus recomputed from every stage of every element (no window, no peak tracking, unlike the
  solver's own moments; a test kernel below, checked against the core's ``charge_balance_many``);
* nuclei: the input state variable is reproduced by the result (for the gas pressure, the
  ideal-gas closure), and the stage fractions of every element add up to one.

The full sweep (>= 1e5 states per input and mixture) is marked slow: ``pytest -m slow -s`` prints
the worst residuals and iteration counts and writes them to a JSON file (``$IONBAL_SWEEP_REPORT``,
default ``<tmp>/ionbal-sweep.json``).  A small version runs in the default suite.
"""

from __future__ import annotations

import json
import math
import os
import tempfile
import time

import numpy as np
import pytest

import ionbal
from ionbal import _problems
from ionbal.core.config import pjit, prange
from ionbal.core.solver import N_CHUNKS, chunk_bounds
from ionbal.core.saha import log_weights
from ionbal.core.solver import charge_balance_many
from ionbal.data.pack import pack

N_SLOW = 100_000
N_FAST = 2_000
LIMIT = 1e-12

MIXTURES = _problems.mixtures()
CASES = [(m, v) for m in MIXTURES for v in _problems.STATE_VARIABLES]



def _params():
    return [pytest.param(m, v, id=f"{m}-{v}") for m, v in CASES]


@pjit
def _conservation_many(T, x, elem_w, elem_first, elem_n, elem_q0, stage_chi, stage_row, stage_lnu_const,
                       lnU, lt0, dlt, out_qpos, out_qneg, out_fsum):
    """Per point: positive and negative charge per nucleus summed over every stage of every element
    (no window, no peak tracking: only terms below exp(-745), which are 0.0 in double precision,
    are skipped), and the worst |sum of an element's stage fractions - 1|, with the fractions formed
    as the API forms them, exp(C_k - k x - max - ln sum)."""
    n = T.size
    n_stage = stage_chi.size
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        C = np.empty(n_stage)
        for p in range(start, stop):
            log_weights(T[p], elem_first, elem_n, stage_chi, stage_row, stage_lnu_const, lnU, lt0, dlt, C)
            qpos = 0.0
            qneg = 0.0
            fdev = 0.0
            for e in range(elem_w.size):
                f = elem_first[e]
                m = -np.inf
                for k in range(elem_n[e]):
                    t = C[f + k] - k * x[p]
                    if t > m:
                        m = t
                s = 0.0
                sp = 0.0
                sn = 0.0
                for k in range(elem_n[e]):
                    d = C[f + k] - k * x[p] - m
                    if d > -745.0:
                        wt = math.exp(d)
                        s += wt
                        q = elem_q0[e] + k
                        if q > 0:
                            sp += q * wt
                        elif q < 0:
                            sn -= q * wt
                qpos += elem_w[e] * sp / s
                qneg += elem_w[e] * sn / s
                lns = math.log(s)
                fs = 0.0
                for k in range(elem_n[e]):
                    d = C[f + k] - k * x[p] - m - lns
                    if d > -745.0:
                        fs += math.exp(d)
                if abs(fs - 1.0) > fdev:
                    fdev = abs(fs - 1.0)
            out_qpos[p] = qpos
            out_qneg[p] = qneg
            out_fsum[p] = fdev


def conservation(result, state_variable: str, value, per_point: bool = False) -> dict:
    """Worst charge- and nuclei-conservation residuals of a result, recomputed from scratch.

    ``per_point=True`` adds the per-point arrays ``charge_all`` and ``closure_all``.
    """
    p = pack(result.mixture)  # the packing solve() used (default overrides, H- on)
    T = np.ascontiguousarray(result.temperature, dtype=np.float64).ravel()
    ne = np.ascontiguousarray(result.electron_density, dtype=np.float64).ravel()
    nn = np.ascontiguousarray(result.nuclei_density, dtype=np.float64).ravel()
    x = np.log(ne)
    qpos = np.empty(T.size)
    qneg = np.empty(T.size)
    fdev = np.empty(T.size)
    _conservation_many(T, x, *p.arrays[:10], qpos, qneg, fdev)
    charge = np.abs(ne + nn * qneg - nn * qpos) / (nn * qpos)

    target = np.broadcast_to(np.asarray(value, dtype=np.float64), result.shape).ravel()
    closure = np.abs(np.asarray(getattr(result, state_variable)).ravel() / target - 1.0)

    worst = int(np.argmax(charge))
    out = {
        "charge": float(charge.max()),
        "charge_worst_state": [float(T[worst]), float(target[worst])],
        "closure": float(closure.max()),
        "fraction_sum": float(fdev.max()),
        "nuclei": max(float(closure.max()), float(fdev.max())),
        "iterations_max": int(np.max(result.iterations)),
        "iterations_mean": float(np.mean(result.iterations)),
    }
    if per_point:
        out["charge_all"] = charge.reshape(result.shape)
        out["closure_all"] = closure.reshape(result.shape)
    return out


def _report_path(n: int) -> str:
    default = os.path.join(tempfile.gettempdir(), "ionbal-sweep.json" if n >= N_SLOW else "ionbal-sweep-fast.json")
    return os.environ.get("IONBAL_SWEEP_REPORT", default) if n >= N_SLOW else default


def _record(n: int, key: str, entry: dict) -> None:
    path = _report_path(n)
    try:
        with open(path) as fh:
            data = json.load(fh)
    except (OSError, ValueError):
        data = {}
    data[key] = entry
    tmp = path + ".tmp"
    with open(tmp, "w") as fh:
        json.dump(data, fh, indent=1, sort_keys=True)
    os.replace(tmp, path)


def _sweep(mixture_name: str, state_variable: str, n: int, seed: int) -> None:
    mixture = MIXTURES[mixture_name]
    if state_variable == "hydrogen_density" and "H" not in mixture:
        # a mixture without hydrogen has no hydrogen density to give: a clear error, not a NaN
        T, _ = _problems.random_states(4, seed)
        with pytest.raises(ValueError, match="no hydrogen"):
            ionbal.solve(T, hydrogen_density=np.full(T.size, 1e15), mixture=mixture)
        with pytest.raises(ValueError, match="no hydrogen"):
            ionbal.solve(T, hydrogen_density=np.full(T.size, 1e15), mixture=mixture, errors="mask")
        return
    t0 = time.perf_counter()
    problem = _problems.matching_states(n, state_variable, mixture=mixture, seed=seed)
    r = problem.solve()
    t_solve = time.perf_counter() - t0
    assert r.shape == (n,)
    status = np.asarray(r.status)
    bad = np.flatnonzero(status != 0)
    assert bad.size == 0, (f"{bad.size} of {n} states did not converge; first: T={problem.temperature[bad[0]]:g} K, "
                           f"{state_variable}={problem.value[bad[0]]:g}, status {status[bad[0]]}")
    res = conservation(r, state_variable, problem.value)
    res.update(states=n, seed=seed, seconds=round(time.perf_counter() - t0, 2), solve_seconds=round(t_solve, 2),
               when=time.strftime("%Y-%m-%d %H:%M:%S"))
    key = f"{mixture_name} | {state_variable}"
    _record(n, key, res)
    print(f"\n{key:<45} n={n} charge={res['charge']:.2e} nuclei={res['nuclei']:.2e} "
          f"(closure {res['closure']:.2e}, fraction sum {res['fraction_sum']:.2e}) "
          f"iterations max={res['iterations_max']} mean={res['iterations_mean']:.2f} [{res['seconds']} s]")
    assert res["charge"] <= LIMIT, res
    assert res["closure"] <= LIMIT, res
    assert res["fraction_sum"] <= LIMIT, res


@pytest.mark.parametrize("mixture_name, state_variable", _params())
def test_sweep_fast(mixture_name, state_variable):
    _sweep(mixture_name, state_variable, N_FAST, seed=11)


@pytest.mark.slow
@pytest.mark.parametrize("mixture_name, state_variable", _params())
def test_sweep_full(mixture_name, state_variable):
    _sweep(mixture_name, state_variable, N_SLOW, seed=2024)


def test_conservation_check_detects_a_wrong_electron_density():
    # the residual is not vacuous: a 1e-9 relative error in n_e shows up as ~1e-9
    r = ionbal.solve(np.array([5000.0, 20000.0]), gas_pressure=np.array([1e4, 1e2]))
    good = conservation(r, "gas_pressure", [1e4, 1e2])
    assert good["charge"] <= LIMIT

    class Shifted:
        def __init__(self, base):
            self._b = base

        def __getattr__(self, name):
            v = getattr(self._b, name)
            return v * (1 + 1e-9) if name == "electron_density" else v

    bad = conservation(Shifted(r), "gas_pressure", [1e4, 1e2])
    assert 1e-10 < bad["charge"] < 1e-8


def test_conservation_kernel_matches_charge_balance_many():
    # the test kernel skips only terms that underflow to 0.0; it must agree with the core's
    # full-sum evaluation to round-off
    T, P = _problems.random_states(500, seed=5)
    for name in ("AGSS09", "pure hydrogen", "hydrogen-free He-C-O"):
        mix = MIXTURES[name]
        r = ionbal.solve(T, gas_pressure=P, mixture=mix, errors="mask")
        ok = np.asarray(r.converged)
        p = pack(mix)
        Tf = np.ascontiguousarray(T[ok])
        x = np.log(np.asarray(r.electron_density)[ok])
        a = [np.empty(Tf.size) for _ in range(3)]
        b = [np.empty(Tf.size) for _ in range(2)]
        _conservation_many(Tf, x, *p.arrays[:10], *a)
        charge_balance_many(Tf, x, p.arrays, *b)
        np.testing.assert_allclose(a[0], b[0], rtol=1e-13, atol=0)
        np.testing.assert_allclose(a[1], b[1], rtol=1e-13, atol=1e-300)
