"""Physical constants in cgs units, from CODATA 2018 (via :mod:`scipy.constants`).

The core works in fixed cgs units: K, cm, g, erg, dyn cm^-2, cm^-3.
"""

from __future__ import annotations

import math

from scipy import constants as _c

#: Boltzmann constant [erg K^-1]
K_B = _c.k * 1e7
#: Boltzmann constant [eV K^-1]
K_B_EV = _c.k / _c.e
#: Planck constant [erg s]
H_PLANCK = _c.h * 1e7
#: electron mass [g]
M_E = _c.m_e * 1e3
#: atomic mass constant [g]
AMU = _c.atomic_mass * 1e3
#: elementary charge [statC]
E_CHARGE = _c.e * _c.c * 10.0
#: Bohr radius [cm]
A_BOHR = _c.physical_constants["Bohr radius"][0] * 100.0
#: electron-volt [erg]
EV = _c.e * 1e7

#: ln of the Saha constant: (2 pi m_e k / h^2)^{3/2} [cm^-3 K^-3/2]
LN_SAHA_CONST = 1.5 * math.log(2.0 * math.pi * M_E * K_B / H_PLANCK**2)
