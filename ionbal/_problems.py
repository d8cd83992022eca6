"""One catalogue of test problems, shared by the tests and the benchmarks.

Each problem is a named set of states (temperature plus one state variable)
and a mixture.  Keeping them in one place means the benchmarks time exactly
what the tests check, and a new hard case added here is both tested and
timed.

The physical domain ionbal promises to converge on: 1,000 K <= T <= 1e6 K
with 1e-6 <= P_gas <= 1e12 dyn cm^-2; the other three state variables over
the ranges those gas pressures produce ("matching ranges").
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .quantities import STATE_INPUTS

__all__ = [
    "T_RANGE",
    "P_GAS_RANGE",
    "STATE_VARIABLES",
    "Problem",
    "mixtures",
    "random_states",
    "matching_states",
    "structured_grid",
]

T_RANGE = (1.0e3, 1.0e6)
P_GAS_RANGE = (1.0e-6, 1.0e12)
STATE_VARIABLES = STATE_INPUTS  # from the quantity registry


def mixtures() -> dict:
    """Named mixtures: the default, and extreme ones for sweeps."""
    from .data.mixture import Mixture

    solar = Mixture.solar("AGSS09")
    thirty = Mixture({el: solar[el] for el in solar.elements[:30]})
    return {
        "AGSS09": solar,
        "30 elements": thirty,
        "pure hydrogen": Mixture({"H": 12.0}),
        "pure helium": Mixture({"He": 12.0}),
        "[M/H]=+1": solar.scaled(metallicity=1.0),
        "[M/H]=-5": solar.scaled(metallicity=-5.0),
        # hydrogen-free: a helium-carbon-oxygen gas, as in the atmospheres of hydrogen-deficient stars
        "hydrogen-free He-C-O": Mixture({"He": 12.0, "C": 10.5, "N": 8.0, "O": 10.0, "Ne": 9.0, "Fe": 7.5}),
    }


@dataclass
class Problem:
    """A batch of states for one state variable and mixture."""

    name: str
    temperature: np.ndarray
    state_variable: str
    value: np.ndarray
    mixture: object = None
    notes: str = field(default="")
    #: the catalogue's problems are those of the atoms-only solve (its reference solvers and
    #: benchmarks); pass molecules=True to solve them with molecules
    molecules: object = False

    def solve(self, **kwargs):
        from .api import solve

        kwargs.setdefault("molecules", self.molecules)
        return solve(self.temperature, mixture=self.mixture, **{self.state_variable: self.value}, **kwargs)


def random_states(n: int, seed: int = 0, t_range=T_RANGE, p_range=P_GAS_RANGE):
    """``n`` log-uniform (T, P_gas) states."""
    rng = np.random.default_rng(seed)
    T = 10 ** rng.uniform(np.log10(t_range[0]), np.log10(t_range[1]), n)
    P = 10 ** rng.uniform(np.log10(p_range[0]), np.log10(p_range[1]), n)
    return T, P


def matching_states(n: int, state_variable: str, mixture=None, seed: int = 0, molecules=False):
    """States for ``state_variable`` over the range matching the gas-pressure domain.

    Log-uniform (T, P_gas) states are solved with the gas-pressure input and
    the resulting values of the other state variable returned, so every
    state is physical and the four inputs cover the same physical domain.
    """
    from .api import solve

    T, P = random_states(n, seed)
    if state_variable == "gas_pressure":
        return Problem(f"random {state_variable}", T, state_variable, P, mixture, molecules=molecules)
    if state_variable not in STATE_VARIABLES:
        raise ValueError(f"unknown state variable {state_variable!r}; use one of {STATE_VARIABLES}")
    base = solve(T, gas_pressure=P, mixture=mixture, molecules=molecules)
    return Problem(f"random {state_variable}", T, state_variable, getattr(base, state_variable), mixture,
                   molecules=molecules)


def structured_grid(n_t: int = 301, n_p: int = 241, t_range=(2.0e3, 5.0e4), p_range=(1.0e-4, 1.0e8)):
    """The default grid of ``ionbal grid``: log-spaced T and P_gas, as flat (T, P) arrays."""
    t = np.geomspace(*t_range, n_t)
    p = np.geomspace(*p_range, n_p)
    T, P = np.meshgrid(t, p, indexing="ij")
    return T.ravel(), P.ravel()
