"""Argument checks shared by the contract functions: ValueError naming the argument and value."""
from __future__ import annotations

import math
import numbers
import operator

__all__ = ['count_at_least', 'finite', 'non_negative', 'real']


def real(name: str, value: object, rule: str) -> float:
    """Return ``value`` as a float, or raise ValueError when it is not a real number."""
    if type(value) is float:
        return value
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise ValueError(f'{name} must be {rule}: {value!r}')
    return float(value)


def non_negative(name: str, value: object, unit: str) -> float:
    """Return ``value`` as a float after checking it is finite and >= 0 (``unit`` for the text)."""
    rule = f'a finite number >= 0 {unit}'
    number = real(name, value, rule)
    if not (math.isfinite(number) and number >= 0.0):
        raise ValueError(f'{name} must be {rule}: {number!r}')
    return number


def count_at_least(name: str, value: object, minimum: int) -> int:
    """Return ``value`` as an int >= ``minimum`` or raise ValueError naming ``name``."""
    try:
        if isinstance(value, bool):
            raise TypeError
        number = operator.index(value)  # type: ignore[arg-type]
    except TypeError:
        raise ValueError(f'{name} must be an integer >= {minimum}: {value!r}') from None
    if number < minimum:
        raise ValueError(f'{name} must be an integer >= {minimum}: {number}')
    return number


def finite(name: str, value: object) -> float:
    """Return ``value`` as a finite float or raise ValueError naming ``name``."""
    try:
        number = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise ValueError(f'{name} must be a number: {value!r}') from None
    if not math.isfinite(number):
        raise ValueError(f'{name} must be finite: {number}')
    return number
