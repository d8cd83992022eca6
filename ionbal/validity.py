"""Where the ideal-gas LTE Saha balance stops being trustworthy, point by point.

ionbal solves the Saha equations of an *ideal, non-degenerate* gas.  Dense
plasmas break those assumptions in several ways.  :func:`assess` evaluates,
at every solved point, four dimensionless parameters from the solution
itself (T, n_e and the ion populations) and flags the points where one of
them passes a threshold.  A flagged point is not a wrong solve of ionbal's
equations; it is a point where those equations no longer describe the gas.
The flags are warnings of size "about ten per cent or worse", not error bars.

The LTE assumption itself is not assessed here: it fails at *low* densities
(chromospheres, winds, nebulae), where none of these flags is raised; see the
cautions in the README.

With molecules (``solve(..., molecules=True)``) the parameters are computed from
the molecular solution: stage fractions are fractions of each element's nuclei
(the molecules' share taken out), the molecular ions (H2+, H2-, HeH+, ...) are
charged particles of the Debye sum and of ⟨q^{5/3}⟩, and every nucleus, free or
bound in a molecule, counts in ``pressure_ionization``.  Condensation (grains,
below about 2,000 K at high pressure) is not assessed: ionbal's data sources
carry no condensed phases (the NIST-JANAF files it reads are gas-phase only), so
there is no saturation test and no flag; see the README caution.

Parameters and thresholds (cgs; e elementary charge, k Boltzmann constant)
-----------------------------------------------------------------------------
``degenerate``: electron degeneracy, parameter ``n_e λ_e³``
    with ``λ_e = h / sqrt(2π m_e k T)`` the electron thermal de Broglie
    wavelength.  The electrons obey Boltzmann statistics, as the Saha
    equation assumes, when ``exp(ψ) = n_e λ_e³ / 2 << 1`` (ψ the degeneracy
    parameter; Clayton 1968, *Principles of Stellar Evolution and
    Nucleosynthesis*, ch. 2; Kippenhahn, Weigert & Weiss 2012, *Stellar
    Structure and Evolution*, 2nd ed., ch. 15; chapter numbers from memory).  The first Fermi-Dirac
    correction to the electron chemical potential is
    ``Δμ / kT ≈ n_e λ_e³ / 2^{5/2}`` (common practice: inverting the series
    ``n_e λ_e³ / 2 = z - z² / 2^{3/2} + ...`` of the Fermi-Dirac integral), and
    every Saha ratio shifts by ``exp(-Δμ/kT)``.  Threshold
    :data:`DEGENERACY_LIMIT` = 0.1, where the ratios are off by ~2 %.

``coupled``: strong Coulomb coupling, parameter Γ
    For ions of charge q the coupling parameter is ``Γ_q = (q e)² / (a_q k T)``
    with ``a_q`` the ion-sphere radius (Ichimaru 1982, Rev. Mod. Phys. 54,
    1017, for the one-component plasma, ``a = (3 / 4π n)^{1/3}``).  In a
    mixture each ion's sphere holds q electrons, ``a_q = (3 q / 4π n_e)^{1/3}``,
    so ``Γ_q = q^{5/3} Γ_e`` with ``Γ_e = e² / (a_e k T)`` and
    ``a_e = (3 / 4π n_e)^{1/3}`` (the linear-mixing form, e.g. Chabrier &
    Potekhin 1998, Phys. Rev. E 58, 4941; reference from memory).  ionbal reports
    ``Γ = Γ_e <q^{5/3}>``, the average over positive ions by number.  The
    plasma is strongly coupled, and ideal-gas thermodynamics fails, for
    ``Γ ≳ 1`` (Ichimaru 1982): threshold :data:`COUPLING_LIMIT` = 1.

``debye_lowering``: Coulomb lowering of the ionization energies, parameter ``e² / (λ_D k T)``
    In the Debye-Hückel theory (Debye & Hückel 1923, Phys. Z. 24, 185) the
    screened ion field lowers the energy that ionizes a stage of charge z by
    ``ΔE = (z + 1) e² / λ_D``, with the Debye length
    ``λ_D = [k T / (4π e² (n_e + Σ_j n_j q_j²))]^{1/2}`` (electrons and all
    ions, H- included).  The parameter is ``ΔE / kT`` for a neutral atom;
    the Saha ratio of that ionization grows by ``exp(ΔE / kT)``.  Threshold
    :data:`DEBYE_LIMIT` = 0.1, a ~10 % change of the neutral-to-first-ion
    ratio (larger for the higher stages).  ionbal applies no such correction.

``pressure_ionization``: bound states squeezed by neighbours, parameter ``(4π/3) n_nuc (2 a_0)³``
    The occupation-probability formalism (Hummer & Mihalas 1988, ApJ 331,
    794) removes a bound level when neighbouring particles come within its
    size; for neutral perturbers its hard-sphere factor is
    ``w = exp[-(4π/3) Σ_ν n_ν (r_i + r_ν)³]`` (form quoted from memory).  ionbal
    evaluates it for the hydrogen ground state, ``r_i = r_ν = a_0`` (the Bohr
    radius), with every nucleus counted as a perturber: a deliberately simple
    density criterion, not their calibrated radii.  The parameter is
    ``-ln w``; threshold :data:`PRESSURE_LIMIT` = 0.1 (w < 0.9), equivalently a
    mean distance between nuclei ``(3 / 4π n_nuc)^{1/3}`` below about
    4.3 a_0.  Excited levels dissolve at far lower densities; that caveat
    (partition functions from a fixed level list) is separate.

``unsolved``
    Points without a converged solution (status code not 0: masked inputs,
    no physical state, iteration limit): their
    parameters are NaN, no physics flag is set, and they are never
    ``trustworthy``.

A point is ``trustworthy`` when it was solved and no physics flag is set.

Constants are CODATA 2018 in cgs (:mod:`ionbal.core.constants`).

Storing flags: :func:`bitmask` packs the flags into one ``uint8`` per point
with the bits of :data:`FLAG_BITS`; :data:`VALIDITY_FLAGS` describes each
flag in one line (for file attributes and command-line summaries).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .core.constants import A_BOHR, E_CHARGE, H_PLANCK, K_B, M_E

__all__ = [
    "Validity",
    "assess",
    "bitmask",
    "from_bitmask",
    "FLAG_BITS",
    "FLAG_NAMES",
    "PHYSICS_FLAGS",
    "VALIDITY_FLAGS",
    "DEGENERACY_LIMIT",
    "COUPLING_LIMIT",
    "DEBYE_LIMIT",
    "PRESSURE_LIMIT",
    "electron_degeneracy",
]

#: flag when n_e λ_e³ exceeds this (Saha ratios off by ~2 %; Clayton 1968; Kippenhahn, Weigert & Weiss 2012)
DEGENERACY_LIMIT = 0.1
#: flag when the ion coupling parameter Γ exceeds this (Ichimaru 1982, Rev. Mod. Phys. 54, 1017)
COUPLING_LIMIT = 1.0
#: flag when the Debye lowering e²/λ_D exceeds this fraction of kT (Debye & Hückel 1923)
DEBYE_LIMIT = 0.1
#: flag when the hard-sphere exponent (4π/3) n_nuc (2 a_0)³ exceeds this (after Hummer & Mihalas 1988)
PRESSURE_LIMIT = 0.1

#: the physics flags, in bit order
PHYSICS_FLAGS: tuple[str, ...] = ("degenerate", "coupled", "debye_lowering", "pressure_ionization")
#: every flag, in bit order (``unsolved`` last, on the top bit)
FLAG_NAMES: tuple[str, ...] = PHYSICS_FLAGS + ("unsolved",)
#: flag name -> bit value in :func:`bitmask`
FLAG_BITS: dict[str, int] = {
    "degenerate": 1,
    "coupled": 2,
    "debye_lowering": 4,
    "pressure_ionization": 8,
    "unsolved": 128,
}
#: flag name -> (parameter name, threshold, one-line description with source)
VALIDITY_FLAGS: dict[str, tuple[str, float, str]] = {
    "degenerate": (
        "degeneracy", DEGENERACY_LIMIT,
        "electron degeneracy: n_e lambda_e^3 > 0.1, lambda_e = h/sqrt(2 pi m_e k T) "
        "(Clayton 1968; Kippenhahn, Weigert & Weiss 2012)",
    ),
    "coupled": (
        "coupling", COUPLING_LIMIT,
        "strong Coulomb coupling: Gamma = <q^(5/3)> e^2/(a_e k T) > 1, a_e = (3/(4 pi n_e))^(1/3) "
        "(Ichimaru 1982, Rev. Mod. Phys. 54, 1017)",
    ),
    "debye_lowering": (
        "debye_parameter", DEBYE_LIMIT,
        "Coulomb lowering of ionization energies: e^2/(lambda_D k T) > 0.1 (Debye & Hueckel 1923)",
    ),
    "pressure_ionization": (
        "pressure_parameter", PRESSURE_LIMIT,
        "pressure ionization: (4 pi/3) n_nuc (2 a_0)^3 > 0.1, i.e. nuclei closer than ~4.3 Bohr radii "
        "(after Hummer & Mihalas 1988, ApJ 331, 794)",
    ),
    "unsolved": ("", math.nan, "not solved: invalid input, no physical state or no convergence (status != 0)"),
}


def electron_degeneracy(temperature, electron_density) -> np.ndarray:
    """``n_e λ_e³`` with ``λ_e = h / sqrt(2π m_e k T)`` (dimensionless)."""
    T = np.asarray(temperature, dtype=np.float64)
    ne = np.asarray(electron_density, dtype=np.float64)
    lam = H_PLANCK / np.sqrt(2.0 * math.pi * M_E * K_B * T)
    return ne * lam**3


@dataclass(frozen=True, eq=False)
class Validity:
    """Per-point validity flags of an ionization balance (see :mod:`ionbal.validity`).

    Every array has the shape of the result.  Flags are boolean; parameters
    are float (NaN at unsolved points).
    """

    degenerate: np.ndarray
    coupled: np.ndarray
    debye_lowering: np.ndarray
    pressure_ionization: np.ndarray
    unsolved: np.ndarray
    #: n_e λ_e³
    degeneracy: np.ndarray
    #: Γ = Γ_e <q^{5/3}> over positive ions
    coupling: np.ndarray
    #: e² / (λ_D k T)
    debye_parameter: np.ndarray
    #: (4π/3) n_nuc (2 a_0)³
    pressure_parameter: np.ndarray

    @property
    def shape(self) -> tuple:
        return self.unsolved.shape

    @property
    def size(self) -> int:
        return int(self.unsolved.size)

    @property
    def flagged(self) -> np.ndarray:
        """True where any physics flag is set."""
        return self.degenerate | self.coupled | self.debye_lowering | self.pressure_ionization

    @property
    def trustworthy(self) -> np.ndarray:
        """True where the point was solved and no physics flag is set."""
        return ~(self.flagged | self.unsolved)

    def flag(self, name: str) -> np.ndarray:
        """One flag by name (see :data:`FLAG_NAMES`)."""
        if name not in FLAG_BITS:
            raise ValueError(f"unknown validity flag {name!r}; flags are {', '.join(FLAG_NAMES)}")
        return getattr(self, name)

    def counts(self) -> dict[str, int]:
        """Number of points with each flag set, plus ``trustworthy`` and ``total``."""
        out = {name: int(np.count_nonzero(getattr(self, name))) for name in FLAG_NAMES}
        out["trustworthy"] = int(np.count_nonzero(self.trustworthy))
        out["total"] = self.size
        return out

    def summary(self) -> str:
        """One line per flag: how many points carry it, and its criterion."""
        c = self.counts()
        n = c["total"]
        lines = [f"validity of ideal-gas LTE Saha: {c['trustworthy']} of {n} point(s) unflagged"]
        for name in FLAG_NAMES:
            lines.append(f"  {name:<20} {c[name]:>10}  {VALIDITY_FLAGS[name][2]}")
        return "\n".join(lines)

    def __repr__(self) -> str:
        c = self.counts()
        inner = " ".join(f"{k}={c[k]}" for k in FLAG_NAMES)
        return f"<Validity shape={self.shape} trustworthy={c['trustworthy']}/{c['total']} {inner}>"


def bitmask(validity: Validity) -> np.ndarray:
    """The flags of every point packed into one ``uint8`` with the bits of :data:`FLAG_BITS`."""
    out = np.zeros(validity.shape, dtype=np.uint8)
    for name, bit in FLAG_BITS.items():
        out |= np.where(getattr(validity, name), np.uint8(bit), np.uint8(0))
    return out


def from_bitmask(mask) -> dict[str, np.ndarray]:
    """Boolean arrays of every flag (and ``trustworthy``) from a :func:`bitmask` array."""
    m = np.asarray(mask)
    if not np.issubdtype(m.dtype, np.integer):
        raise ValueError(f"a validity bitmask must be an integer array, got dtype {m.dtype}")
    out = {name: (m & bit) != 0 for name, bit in FLAG_BITS.items()}
    out["trustworthy"] = m == 0
    return out


def assess(result, *, use_kernel: bool = True) -> Validity:
    """Validity flags of an :class:`ionbal.IonizationResult` (see the module docstring).

    Parameters
    ----------
    result : IonizationResult
    use_kernel : bool
        Sum the ion moments with the core kernel in bounded chunks (default);
        ``False`` uses the public ``fractions()`` of the result (for checks).
    """
    T = np.asarray(result.temperature, dtype=np.float64)
    ne = np.asarray(result.electron_density, dtype=np.float64)
    nn = np.asarray(result.nuclei_density, dtype=np.float64)
    m_q2, m_q53, m_pos = result.ion_moments(use_kernel=use_kernel)

    solved = np.isfinite(ne) & np.isfinite(nn) & np.isfinite(T) & (T > 0)
    status = getattr(result, "status", None)
    if status is not None:
        solved &= np.asarray(status) == 0
    unsolved = ~solved

    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        kT = K_B * T
        degeneracy = electron_degeneracy(T, ne)
        # Γ = Γ_e <q^{5/3}>, Γ_e = e² / (a_e k T), a_e = (3 / (4π n_e))^{1/3}
        a_e = np.cbrt(3.0 / (4.0 * math.pi * ne))
        gamma_e = E_CHARGE**2 / (a_e * kT)
        mean_q53 = np.where(m_pos > 0, m_q53 / m_pos, 0.0)
        coupling = gamma_e * mean_q53
        # Debye length from electrons and every charged stage (n_j q_j² = n_nuc Σ w f q²)
        lam_d = np.sqrt(kT / (4.0 * math.pi * E_CHARGE**2 * (ne + nn * m_q2)))
        debye = E_CHARGE**2 / (lam_d * kT)
        pressure = (4.0 * math.pi / 3.0) * nn * (2.0 * A_BOHR) ** 3

    params = []
    for a in (degeneracy, coupling, debye, pressure):
        a = np.where(solved, a, np.nan)
        params.append(a)
    degeneracy, coupling, debye, pressure = params

    def over(a, limit):
        return solved & (np.nan_to_num(a, nan=0.0) > limit)

    return Validity(
        degenerate=over(degeneracy, DEGENERACY_LIMIT),
        coupled=over(coupling, COUPLING_LIMIT),
        debye_lowering=over(debye, DEBYE_LIMIT),
        pressure_ionization=over(pressure, PRESSURE_LIMIT),
        unsolved=unsolved,
        degeneracy=degeneracy,
        coupling=coupling,
        debye_parameter=debye,
        pressure_parameter=pressure,
    )
