"""Axes of a grid: a name and strictly increasing values (log-spaced, linear or explicit)."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Iterable, Mapping

import numpy as np

from ..quantities import STATE_INPUTS
from ..quantities import unit as _unit

__all__ = ["Axis", "STATE_AXES", "AXIS_NAMES", "DEFAULT_TEMPERATURE_AXIS", "DEFAULT_STATE_AXIS"]

#: the state variables a grid axis can be (besides temperature), from the quantity registry
STATE_AXES: tuple[str, ...] = STATE_INPUTS
#: every axis name
AXIS_NAMES: tuple[str, ...] = ("temperature",) + STATE_AXES + ("metallicity", "alpha")


#: default axes of ``ionbal grid`` (log-spaced)
DEFAULT_TEMPERATURE_AXIS = "2000:50000:301"


DEFAULT_STATE_AXIS = "1e-4:1e8:241"


_SPACINGS = ("log", "linear", "explicit")


def _finite_float(value, what: str) -> float:
    if isinstance(value, bool):
        raise ValueError(f"{what} must be a number, got {value!r}")
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{what} must be a number, got {value!r}") from None
    if not math.isfinite(v):
        raise ValueError(f"{what} must be finite, got {value!r}")
    return v


@dataclass(frozen=True)
class Axis:
    """One axis of a grid: a name and strictly increasing values.

    Build one with :meth:`log`, :meth:`linear`, :meth:`explicit` or
    :meth:`parse`.  State axes (temperature and the state variable) need
    positive values in cgs units (K, dyn cm^-2, g cm^-3, cm^-3); composition
    axes ([M/H], [alpha/M]) are in dex.

    Attributes
    ----------
    name : str
        ``"temperature"``, a state variable, ``"metallicity"`` or ``"alpha"``.
    values : tuple of float
        The axis values, strictly increasing.
    spacing : str
        ``"log"``, ``"linear"`` or ``"explicit"`` (how the values were made).
    """

    name: str
    values: tuple
    spacing: str = "explicit"

    def __post_init__(self) -> None:
        if self.name not in AXIS_NAMES:
            raise ValueError(f"unknown axis {self.name!r}; axes are {', '.join(AXIS_NAMES)}")
        if self.spacing not in _SPACINGS:
            raise ValueError(f"axis spacing must be one of {', '.join(_SPACINGS)}, got {self.spacing!r}")
        vals = tuple(_finite_float(v, f"{self.name} axis value") for v in self.values)
        if not vals:
            raise ValueError(f"the {self.name} axis has no values")
        if len(vals) > 10_000_000:
            raise ValueError(f"the {self.name} axis has {len(vals)} values; at most 10,000,000 are accepted")
        if self.is_state:
            for i, v in enumerate(vals):
                if not v > 0:
                    raise ValueError(f"{self.name} axis value {v:g} at position {i} must be positive "
                                     f"[{_unit(self.name)}]")
        else:
            for i, v in enumerate(vals):
                if abs(v) > 10:
                    raise ValueError(f"{self.name} axis value {v:g} at position {i} is not a plausible shift "
                                     "in dex (|value| <= 10)")
        for i in range(1, len(vals)):
            if not vals[i] > vals[i - 1]:
                raise ValueError(f"{self.name} axis values must be strictly increasing; {vals[i]:g} at "
                                 f"position {i} follows {vals[i - 1]:g}")
        object.__setattr__(self, "values", vals)

    # -- constructors -------------------------------------------------------------------------------
    @classmethod
    def log(cls, name: str, start: float, stop: float, num: int) -> "Axis":
        """``num`` values spaced evenly in log from ``start`` to ``stop`` (both included)."""
        start, stop, num = cls._range_args(name, start, stop, num)
        if start <= 0 or stop <= 0:
            raise ValueError(f"a log-spaced {name} axis needs positive ends, got {start:g} and {stop:g}")
        vals = np.geomspace(start, stop, num) if num > 1 else np.array([start])
        return cls(name, tuple(float(v) for v in vals), "log")

    @classmethod
    def linear(cls, name: str, start: float, stop: float, num: int) -> "Axis":
        """``num`` evenly spaced values from ``start`` to ``stop`` (both included)."""
        start, stop, num = cls._range_args(name, start, stop, num)
        vals = np.linspace(start, stop, num) if num > 1 else np.array([start])
        return cls(name, tuple(float(v) for v in vals), "linear")

    @classmethod
    def explicit(cls, name: str, values: Iterable[float]) -> "Axis":
        """An axis with the given values (strictly increasing)."""
        if isinstance(values, (str, bytes)):
            raise ValueError(f"{name} axis values must be numbers, got the string {values!r}")
        try:
            vals = [float(np.asarray(v, dtype=float)) for v in np.ravel(np.asarray(values, dtype=object))]
        except (TypeError, ValueError):
            raise ValueError(f"{name} axis values must be numbers, got {values!r}") from None
        return cls(name, tuple(vals), "explicit")

    @staticmethod
    def _range_args(name, start, stop, num):
        start = _finite_float(start, f"{name} axis start")
        stop = _finite_float(stop, f"{name} axis stop")
        if isinstance(num, bool) or not isinstance(num, (int, np.integer)):
            raise ValueError(f"the number of {name} values must be an integer, got {num!r}")
        num = int(num)
        if num < 1:
            raise ValueError(f"the number of {name} values must be at least 1, got {num}")
        if num > 1 and not stop > start:
            raise ValueError(f"the {name} axis must increase: start {start:g} is not below stop {stop:g}")
        return start, stop, num

    @classmethod
    def parse(cls, name: str, text: str) -> "Axis":
        """Parse an axis from text.

        Forms: ``START:STOP:NUM`` (log-spaced for state axes, linear for
        composition axes), ``START:STOP:NUM:log`` or ``START:STOP:NUM:linear``,
        or explicit values ``V1,V2,...`` (one value is allowed).

        Examples
        --------
        >>> Axis.parse("temperature", "3000:9000:4:linear").values
        (3000.0, 5000.0, 7000.0, 9000.0)
        >>> Axis.parse("metallicity", "-2,-1,0").values
        (-2.0, -1.0, 0.0)
        """
        if not isinstance(text, str) or not text.strip():
            raise ValueError(f"empty {name} axis; give START:STOP:NUM[:log|linear] or V1,V2,...")
        s = text.strip()
        if ":" in s:
            parts = [p.strip() for p in s.split(":")]
            if len(parts) not in (3, 4):
                raise ValueError(f"cannot read {name} axis {text!r}; give START:STOP:NUM[:log|linear] "
                                 "or V1,V2,...")
            try:
                start, stop = float(parts[0]), float(parts[1])
            except ValueError:
                raise ValueError(f"cannot read {name} axis {text!r}: start and stop must be numbers") from None
            try:
                num = int(parts[2])
            except ValueError:
                raise ValueError(f"cannot read {name} axis {text!r}: the number of values {parts[2]!r} is not "
                                 "a whole number") from None
            is_state = name == "temperature" or name in STATE_AXES
            spacing = parts[3].lower() if len(parts) == 4 else ("log" if is_state else "linear")
            if spacing in ("log", "geom", "logarithmic"):
                return cls.log(name, start, stop, num)
            if spacing in ("lin", "linear"):
                return cls.linear(name, start, stop, num)
            raise ValueError(f"cannot read {name} axis {text!r}: spacing must be 'log' or 'linear', "
                             f"got {parts[3]!r}")
        vals = []
        for item in s.split(","):
            item = item.strip()
            if not item:
                raise ValueError(f"cannot read {name} axis {text!r}: empty value in the list")
            try:
                vals.append(float(item))
            except ValueError:
                raise ValueError(f"cannot read {name} axis {text!r}: {item!r} is not a number") from None
        return cls.explicit(name, vals)

    # -- properties ---------------------------------------------------------------------------------
    @property
    def is_state(self) -> bool:
        return self.name == "temperature" or self.name in STATE_AXES

    @property
    def array(self) -> np.ndarray:
        """The values as a float64 array."""
        return np.array(self.values, dtype=np.float64)

    @property
    def unit(self) -> str:
        """CF unit string (cgs), from the quantity registry."""
        return _unit(self.name)

    def __len__(self) -> int:
        return len(self.values)

    def describe(self) -> str:
        """One line, e.g. ``temperature 2000-50000 K (301 values, log)``."""
        v = self.values
        unit = "" if self.unit in ("", "1") else f" {self.unit}"
        rng = f"{v[0]:g}" if len(v) == 1 else f"{v[0]:g}-{v[-1]:g}"
        return f"{self.name} {rng}{unit} ({len(v)} value{'s' if len(v) != 1 else ''}, {self.spacing})"

    def to_dict(self) -> dict:
        return {"name": self.name, "spacing": self.spacing, "values": list(self.values)}

    @classmethod
    def from_dict(cls, d: Mapping) -> "Axis":
        return cls(d["name"], tuple(d["values"]), d.get("spacing", "explicit"))

