"""Per-point status codes of the solver, and the one table that explains them.

The kernels write a small integer per point; :func:`messages` and the result
object translate it.  Codes are stable: new codes are only ever appended.
"""

from __future__ import annotations

import numpy as np

#: converged: charge conservation holds to the requested tolerance
OK = 0
#: the iteration limit was reached before the tolerance was met
MAX_ITERATIONS = 1
#: temperature or state variable is not a finite positive number
INVALID_INPUT = 2
#: temperature outside the range of the partition-function tables
TEMPERATURE_OUT_OF_RANGE = 3
#: no physical solution: the mixture cannot supply the requested free electrons
NO_SOLUTION = 4

#: code -> (short name, message)
STATUS_TABLE: dict[int, tuple[str, str]] = {
    OK: ("ok", "converged"),
    MAX_ITERATIONS: ("max_iterations", "iteration limit reached before charge conservation converged"),
    INVALID_INPUT: ("invalid_input", "temperature or state variable is not a finite positive number"),
    TEMPERATURE_OUT_OF_RANGE: (
        "temperature_out_of_range",
        "temperature outside the range of the partition-function tables",
    ),
    NO_SOLUTION: (
        "no_solution",
        "no physical solution: the mixture cannot supply this many free electrons at this temperature",
    ),
}


def success(status: np.ndarray) -> np.ndarray:
    """Boolean array, True where the solve converged."""
    return np.asarray(status) == OK


def messages(status: np.ndarray) -> np.ndarray:
    """Translate an array of status codes into an array of messages."""
    status = np.asarray(status)
    table = np.array([STATUS_TABLE[k][1] for k in sorted(STATUS_TABLE)], dtype=object)
    out = np.full(status.shape, "unknown status code", dtype=object)
    known = (status >= 0) & (status < table.size)
    out[known] = table[status[known]]
    return out
