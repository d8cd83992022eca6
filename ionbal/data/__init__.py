"""The data layer of ionbal: elements, species, ionization energies, partition functions, abundances.

Everything here is plain numpy; the tables are read lazily (on first use) from
the package data ``ionbal.tables`` and cached.
"""

from .elements import SYMBOLS, atomic_mass, atomic_number, symbol
from .levels import hydrogen_partition_function, partition_function_from_levels, read_level_file
from .mixture import ALPHA_ELEMENTS, SOLAR_MIXTURES, MassFractions, Mixture
from .species import Species, parse_element, parse_species
from .tables import (
    H_MINUS_BINDING_EV,
    PartitionGrid,
    ground_weight,
    ground_weight_table,
    ionization_energy,
    ionization_energy_table,
    partition_function,
    partition_function_source,
    partition_grid,
)

__all__ = [
    "Mixture",
    "partition_function",
    "ionization_energy",
    "Species",
    "parse_species",
    "parse_element",
    "SYMBOLS",
    "atomic_number",
    "symbol",
    "atomic_mass",
    "MassFractions",
    "SOLAR_MIXTURES",
    "ALPHA_ELEMENTS",
    "H_MINUS_BINDING_EV",
    "PartitionGrid",
    "partition_grid",
    "partition_function_source",
    "ionization_energy_table",
    "ground_weight",
    "ground_weight_table",
    "partition_function_from_levels",
    "hydrogen_partition_function",
    "read_level_file",
]
