"""ionbal: the LTE ionization balance of stellar atmospheres.

At every temperature and pressure (or density) of a stellar atmosphere,
ionbal solves the Saha equation of every element together with charge and
particle conservation, and returns the free-electron density and how each
element splits over its ionization stages.

>>> import ionbal
>>> r = ionbal.solve(6000.0, gas_pressure=1e5)          # doctest: +SKIP
>>> r.electron_density, r.fraction("Fe II")              # doctest: +SKIP
"""

from ._version import __version__
from .api import IonizationResult, solve
from .data import Mixture, Species, ionization_energy, parse_species, partition_function

__all__ = [
    "__version__",
    "solve",
    "IonizationResult",
    "Mixture",
    "Species",
    "parse_species",
    "partition_function",
    "ionization_energy",
]
