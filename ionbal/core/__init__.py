"""ionbal's numerical core: numba kernels on plain float arrays in fixed cgs units.

Nothing here imports astropy or h5py or does I/O; the layers above convert
units, pack the atomic data (:mod:`ionbal.data.pack`) and interpret results.
"""

from . import status
from .config import get_num_threads, set_num_threads
from .solver import (
    MODE_ELECTRON_PRESSURE,
    MODE_GAS_PRESSURE,
    MODE_NUCLEI_DENSITY,
    charge_balance_many,
    log_fractions_many,
    solve_many,
)

__all__ = [
    "status",
    "get_num_threads",
    "set_num_threads",
    "MODE_ELECTRON_PRESSURE",
    "MODE_GAS_PRESSURE",
    "MODE_NUCLEI_DENSITY",
    "charge_balance_many",
    "log_fractions_many",
    "solve_many",
]
