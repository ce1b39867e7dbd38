"""Atmospheric absorption of sound in air, ISO 9613-1:1993 pure-tone formula.

The attenuation coefficient in dB/m is

    alpha = 8.686 f^2 [1.84e-11 (pa/pr)^-1 (T/T0)^(1/2)
                       + (T/T0)^(-5/2) (0.01275 exp(-2239.1/T) / (frO + f^2/frO)
                                        + 0.1068 exp(-3352/T) / (frN + f^2/frN))]

with the oxygen and nitrogen relaxation frequencies (Hz)

    frO = (pa/pr) (24 + 4.04e4 h (0.02 + h) / (0.391 + h))
    frN = (pa/pr) (T/T0)^(-1/2) (9 + 280 h exp(-4.170 ((T/T0)^(-1/3) - 1)))

and the molar concentration of water vapour h (%) from the relative humidity:
``h = RH (psat/pr) / (pa/pr)``, ``psat/pr = 10^C``, ``C = -6.8346 (T01/T)^1.261 + 4.6151``.
T is the air temperature in K, T0 = 293.15 K, T01 = 273.16 K (triple point of water),
pr = 101.325 kPa. The standard's tables stop at 10 kHz; its formulae also serve ultrasonic
frequencies (acoustical scale modelling), with a larger uncertainty. At 40 kHz, 20 degC and
50 % relative humidity alpha is about 1.3 dB/m: 2.6 dB per metre of range on the round trip.
"""
from __future__ import annotations

import math

__all__ = [
    'REFERENCE_PRESSURE_KPA',
    'REFERENCE_TEMPERATURE_K',
    'TRIPLE_POINT_K',
    'absorption_db_per_m',
]

REFERENCE_PRESSURE_KPA = 101.325
"""Reference ambient atmospheric pressure pr, kPa."""

REFERENCE_TEMPERATURE_K = 293.15
"""Reference air temperature T0, K (20 degC)."""

TRIPLE_POINT_K = 273.16
"""Triple-point isotherm temperature of water T01, K."""

_ZERO_CELSIUS_K = 273.15


def _checked(name: str, value: float, low: float, high: float, unit: str,
             low_open: bool = False) -> float:
    """Return ``value`` as a float in [low, high] (or (low, high]), else raise ValueError."""
    bracket = '(' if low_open else '['
    rule = f'a finite number in {bracket}{low:g}, {high:g}] {unit}'
    if isinstance(value, bool):
        raise ValueError(f'{name} must be {rule}: {value!r}')
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise ValueError(f'{name} must be {rule}: {value!r}') from None
    ok = (low < number if low_open else low <= number) and number <= high
    if not ok:  # also refuses NaN
        raise ValueError(f'{name} must be {rule}: {value!r}')
    return number


def absorption_db_per_m(frequency_hz: float, temperature_c: float = 20.0,
                        relative_humidity: float = 50.0,
                        pressure_kpa: float = REFERENCE_PRESSURE_KPA) -> float:
    """Return the pure-tone atmospheric absorption coefficient in dB/m (ISO 9613-1:1993).

    ``frequency_hz`` in Hz, ``temperature_c`` in degC, ``relative_humidity`` in % (0 to 100),
    ``pressure_kpa`` the ambient pressure in kPa. Raises ValueError naming a bad argument.
    """
    f = _checked('frequency_hz', frequency_hz, 0.0, 1e7, 'Hz', low_open=True)
    temp_c = _checked('temperature_c', temperature_c, -90.0, 150.0, 'degC')
    rh = _checked('relative_humidity', relative_humidity, 0.0, 100.0, '%')
    pa = _checked('pressure_kpa', pressure_kpa, 0.0, 1000.0, 'kPa', low_open=True)

    t = temp_c + _ZERO_CELSIUS_K
    tr = t / REFERENCE_TEMPERATURE_K
    pr = pa / REFERENCE_PRESSURE_KPA
    c_sat = -6.8346 * (TRIPLE_POINT_K / t) ** 1.261 + 4.6151
    h = rh * 10.0 ** c_sat / pr
    fr_o = pr * (24.0 + 4.04e4 * h * (0.02 + h) / (0.391 + h))
    fr_n = pr * tr ** -0.5 * (9.0 + 280.0 * h * math.exp(-4.170 * (tr ** (-1.0 / 3.0) - 1.0)))
    f2 = f * f
    return float(8.686 * f2 * (
        1.84e-11 / pr * math.sqrt(tr)
        + tr ** -2.5 * (0.01275 * math.exp(-2239.1 / t) / (fr_o + f2 / fr_o)
                        + 0.1068 * math.exp(-3352.0 / t) / (fr_n + f2 / fr_n))))
