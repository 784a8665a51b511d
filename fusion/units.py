"""Quantities with units in config values, parsed with pint into SI floats.

A config value may be a bare number (taken in the documented SI unit of its
key) or a string such as ``"135 GPa"``, ``"250 um"``, ``"5 Hz"`` or
``"-0.3e-6 / K"``. Inside the code every quantity is a float in SI units
(Pa, m, K, s, J, W); angles are the one exception, kept in degrees as the
trade writes layups.
"""

from __future__ import annotations

import functools
import math
from numbers import Real

from .errors import ConfigError

__all__ = ["parse_quantity", "unit_registry"]


@functools.lru_cache(maxsize=1)
def unit_registry():
    """The project's shared :class:`pint.UnitRegistry` (built once, lazily)."""
    import pint

    ureg = pint.UnitRegistry(autoconvert_offset_to_baseunit=True)
    ureg.define("microstrain = 1e-6 = ustrain = µε")
    ureg.define("strain = 1 = eps")
    return ureg


@functools.lru_cache(maxsize=256)
def _unit(unit: str):
    return unit_registry().Unit(unit) if unit else unit_registry().dimensionless


def _is_plain_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def parse_quantity(value, unit: str, *, key: str, source: str | None = None) -> float:
    """Convert a config value to a float in ``unit``.

    Parameters
    ----------
    value : float, int or str
        A bare number (already in ``unit``) or a string with a unit.
    unit : str
        The target unit, a pint expression (``"Pa"``, ``"1/K"``, ``"m"``, ``"deg"``, ``""``).
    key : str
        The dotted config key, named in any error.

    Returns
    -------
    float
        The value expressed in ``unit``.

    Raises
    ------
    ConfigError
        When the value is not a number, cannot be parsed, is not finite, or has
        the wrong dimension ("5 mm" for a frequency).

    Examples
    --------
    >>> parse_quantity("135 GPa", "Pa", key="E1")
    135000000000.0
    >>> parse_quantity(5, "Hz", key="frequency")
    5.0
    """
    if isinstance(value, bool) or not isinstance(value, (Real, str)):
        raise ConfigError(key, f"expected a number or a quantity string in {unit or 'no unit'}, "
                          f"got {value!r}", source=source)
    if isinstance(value, Real):
        out = float(value)
    else:
        text = value.strip().replace("µ", "u").replace("μ", "u")
        if not text:
            raise ConfigError(key, f"expected a quantity in {unit or 'no unit'}, got an empty string",
                              source=source)
        ureg = unit_registry()
        try:
            q = ureg.Quantity(text)
        except Exception as e:  # pint raises many kinds (Undefined, Tokenize, Syntax...)
            raise ConfigError(key, f"cannot read {value!r} as a quantity "
                              f"(expected a number and a unit, e.g. '5 {unit}')",
                              source=source) from e
        if not isinstance(q, ureg.Quantity) or _is_plain_number(text):
            # a bare number written as a string ("3.5") means the documented unit
            q = ureg.Quantity(float(q.magnitude if isinstance(q, ureg.Quantity) else q), _unit(unit))
        try:
            out = float(q.to(_unit(unit)).magnitude)
        except Exception as e:
            dims = str(q.dimensionality)
            raise ConfigError(key, f"{value!r} has dimension {dims}, expected a value in "
                              f"{unit or 'no unit (dimensionless)'}", source=source) from e
    if not math.isfinite(out):
        raise ConfigError(key, f"expected a finite value, got {value!r}", source=source)
    return out
