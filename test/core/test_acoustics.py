"""Tests for sonar_guard.core.acoustics against outside values: CoolProp, physics, reference.md."""
from __future__ import annotations

import math

from CoolProp.CoolProp import PropsSI
from hypothesis import given
from hypothesis import strategies as st
import numpy as np
import pytest

from sonar_guard.core import acoustics
from sonar_guard.core.acoustics import (
    blind_range,
    detection_latency,
    echo_timeout,
    range_from_tof,
    reported_range,
    speed_of_sound,
    tof_from_range,
)

# Ideal-gas constants for F2, reference.md section 1.
GAMMA_AIR = 1.4  # reference.md F2 (ratio of specific heats, diatomic ideal gas)
R_J_PER_MOL_K = 8.314462618  # reference.md F2 (CODATA/SI exact molar gas constant)
M_AIR_KG_PER_MOL = 0.0289647  # reference.md F2 (dry-air molar mass; marked "from memory - verify")

temperatures_c = st.floats(min_value=-90.0, max_value=150.0)
ranges_m = st.floats(min_value=0.0, max_value=50.0)


def coolprop_speed_of_sound(temp_c: float) -> float:
    """Return CoolProp's speed of sound in air at 1 atm, m/s."""
    return PropsSI('A', 'T', temp_c + 273.15, 'P', 101325, 'Air')  # CoolProp (real-gas EOS)


def f1_speed_of_sound(temp_c: float) -> float:
    """Return reference.md F1, written out here independently of the module, m/s."""
    return 331.3 * (1.0 + temp_c / 273.15) ** 0.5  # reference.md F1


def test_public_names_exist_and_all_is_sorted() -> None:
    """Every name in __all__ exists and __all__ is sorted."""
    assert acoustics.__all__ == sorted(acoustics.__all__)
    for name in acoustics.__all__:
        assert hasattr(acoustics, name), name


@pytest.mark.parametrize('temp_c', np.linspace(-20.0, 50.0, 15).tolist())
def test_speed_of_sound_matches_coolprop_from_minus_20_to_50_c(temp_c: float) -> None:
    """The dry-air model agrees with CoolProp's real-gas air within 0.5 %."""
    expected = coolprop_speed_of_sound(temp_c)  # CoolProp (real-gas EOS for air)
    assert speed_of_sound(temp_c) == pytest.approx(expected, rel=5e-3)


@pytest.mark.parametrize('temp_c', np.linspace(-10.0, 40.0, 11).tolist())
def test_speed_of_sound_is_within_0_2_mps_of_coolprop_from_minus_10_to_40_c(
        temp_c: float) -> None:
    """From -10 to 40 degC the model is within 0.2 m/s of CoolProp (reference.md section 1)."""
    expected = coolprop_speed_of_sound(temp_c)  # CoolProp (real-gas EOS for air)
    assert abs(speed_of_sound(temp_c) - expected) <= 0.2  # tol: reference.md section 1


@pytest.mark.parametrize('temp_c, coolprop_mps', [
    # reference.md section 1 table, CoolProp column [library-computed: CoolProp 8.0.0]
    (-10.0, 325.315),
    (0.0, 331.441),
    (20.0, 343.344),
    (25.0, 346.251),
    (40.0, 354.817),
])
def test_speed_of_sound_is_within_0_2_mps_of_tabulated_coolprop_values(
        temp_c: float, coolprop_mps: float) -> None:
    """The model is within 0.2 m/s of the CoolProp values tabulated in reference.md."""
    assert speed_of_sound(temp_c) == pytest.approx(coolprop_mps, abs=0.2)  # reference.md sec. 1


@pytest.mark.parametrize('temp_c', np.linspace(-40.0, 100.0, 15).tolist())
def test_speed_of_sound_matches_ideal_gas_sqrt_gamma_r_t_over_m(temp_c: float) -> None:
    """The 331.3 m/s anchored form agrees with sqrt(gamma*R*T/M) to 1e-3 relative."""
    temp_k = temp_c + 273.15
    # ideal gas c = sqrt(gamma R T / M), reference.md F2 (physics, constants named above)
    expected = math.sqrt(GAMMA_AIR * R_J_PER_MOL_K * temp_k / M_AIR_KG_PER_MOL)
    assert speed_of_sound(temp_c) == pytest.approx(expected, rel=1e-3)


@pytest.mark.parametrize('temp_c', [-90.0, -10.0, 0.0, 20.0, 25.0, 40.0, 150.0])
def test_speed_of_sound_equals_formula_f1(temp_c: float) -> None:
    """The function is exactly F1 = 331.3*sqrt(1 + T/273.15)."""
    assert speed_of_sound(temp_c) == pytest.approx(f1_speed_of_sound(temp_c), rel=1e-9)


@pytest.mark.parametrize('temp_c, f1_mps', [
    # reference.md section 1 table, F1 column [computed from formula], tol 1e-3 m/s
    (-10.0, 325.179),
    (0.0, 331.300),
    (20.0, 343.215),
    (25.0, 346.129),
    (40.0, 354.729),
])
def test_speed_of_sound_matches_tabulated_f1_values(temp_c: float, f1_mps: float) -> None:
    """The F1 column of reference.md section 1 is reproduced to 1e-3 m/s."""
    assert speed_of_sound(temp_c) == pytest.approx(f1_mps, abs=1e-3)  # reference.md sec. 1 F1


def test_speed_of_sound_default_is_20_c() -> None:
    """Without a temperature the speed of sound is the 20 degC value."""
    assert speed_of_sound() == speed_of_sound(20.0)  # design.md contract: temp_c=20.0


def test_speed_of_sound_rises_0_585_mps_per_kelvin_at_20_c() -> None:
    """dc/dT at 20 degC is about 0.585 m/s per K (reference.md section 1 sensitivity)."""
    step_k = 0.01
    slope = (speed_of_sound(20.0 + step_k) - speed_of_sound(20.0 - step_k)) / (2 * step_k)
    assert slope == pytest.approx(0.585, abs=0.005)  # reference.md sec. 1: dc/dT ~ 0.585 m/s/K


@pytest.mark.parametrize('temp_c, tof_s, expected_m', [
    # reference.md section 2 "range" rows: d = c*t/2, tol 1e-5 m
    (20.0, 5.000e-3, 0.85804),
    (25.0, 11.650e-3, 2.01620),
    (-5.0, 2.400e-3, 0.39390),
    (35.0, 23.300e-3, 4.09947),
])
def test_range_from_tof_matches_reference_rows(
        temp_c: float, tof_s: float, expected_m: float) -> None:
    """Range from echo time reproduces reference.md section 2 (d = c*t/2)."""
    assert range_from_tof(tof_s, temp_c) == pytest.approx(expected_m, abs=1e-5)  # reference.md


@pytest.mark.parametrize('temp_c, max_range_m, expected_ms', [
    # reference.md section 2 "timeout" rows: t_max = 2*R_max/c, tol 1e-3 ms
    (10.0, 4.5, 26.6817),
    (20.0, 6.0, 34.9635),
    (30.0, 2.5, 14.3258),
])
def test_echo_timeout_matches_reference_rows(
        temp_c: float, max_range_m: float, expected_ms: float) -> None:
    """Echo timeout reproduces reference.md section 2 (t_max = 2*R_max/c)."""
    timeout_ms = echo_timeout(max_range_m, temp_c) * 1e3
    assert timeout_ms == pytest.approx(expected_ms, abs=1e-3)  # reference.md sec. 2


@pytest.mark.parametrize('temp_c, ring_down_s, expected_m', [
    # reference.md section 2 "blanking" rows: d_min = c*t_ring/2, tol 1e-5 m
    (20.0, 1.20e-3, 0.20593),
    (20.0, 0.35e-3, 0.06006),
    (0.0, 0.60e-3, 0.09939),
])
def test_blind_range_matches_reference_rows(
        temp_c: float, ring_down_s: float, expected_m: float) -> None:
    """Blind range reproduces reference.md section 2 (d_min = c*t_ring/2)."""
    assert blind_range(ring_down_s, temp_c) == pytest.approx(expected_m, abs=1e-5)  # reference.md


def test_reported_range_of_sensor_assuming_20_c_in_minus_10_c_air_reads_long() -> None:
    """True 2.000 m at -10 degC read by firmware assuming 20 degC gives 2.1109 m."""
    reading = reported_range(2.0, true_temp_c=-10.0, assumed_temp_c=20.0)
    # reference.md section 2 "temp-comp error" row (d = c_assumed * t_true / 2), tol 1e-4 m
    assert reading == pytest.approx(2.1109, abs=1e-4)
    assert reading / 2.0 - 1.0 == pytest.approx(0.0555, abs=5e-5)  # reference.md: +5.55 %


@given(true_range_m=ranges_m, temp_c=temperatures_c)
def test_reported_range_is_exact_when_assumed_temperature_is_true(
        true_range_m: float, temp_c: float) -> None:
    """A sensor that assumes the true temperature reports the true range (d = c*t/2)."""
    assert reported_range(true_range_m, temp_c, temp_c) == pytest.approx(true_range_m, rel=1e-12)


@given(true_range_m=ranges_m, true_temp_c=temperatures_c, assumed_temp_c=temperatures_c)
def test_reported_range_equals_tof_converted_with_assumed_speed(
        true_range_m: float, true_temp_c: float, assumed_temp_c: float) -> None:
    """Reported range is the true echo time converted with the assumed c (d = c*t/2)."""
    true_tof = 2.0 * true_range_m / f1_speed_of_sound(true_temp_c)  # physics: t = 2R/c, F1
    expected = f1_speed_of_sound(assumed_temp_c) * true_tof / 2.0  # physics: d = c*t/2, F1
    assert reported_range(true_range_m, true_temp_c, assumed_temp_c) == pytest.approx(
        expected, rel=1e-12, abs=1e-300)


@pytest.mark.parametrize('slots_s, index, range_m, temp_c', [
    ([0.030, 0.030, 0.030, 0.030], 0, 2.0, 20.0),
    ([0.025, 0.040, 0.015], 1, 4.0, 10.0),
    ([0.050], 0, 0.5, -5.0),
    ((0.010, 0.020, 0.030, 0.040, 0.050), 4, 0.0, 35.0),
    (np.array([0.026, 0.031, 0.029]), 2, 3.3, 25.0),
])
def test_detection_latency_is_other_slots_plus_round_trip(
        slots_s: list[float], index: int, range_m: float, temp_c: float) -> None:
    """Latency is the sum of the other slots plus 2R/c, summed independently here."""
    others = 0.0
    for position, slot in enumerate(slots_s):  # independent loop sum of the other slots
        if position != index:
            others += float(slot)
    expected = others + 2.0 * range_m / f1_speed_of_sound(temp_c)  # design.md contract, F1
    assert detection_latency(slots_s, index, range_m, temp_c) == pytest.approx(expected,
                                                                               rel=1e-12)


def test_detection_latency_at_20_c_and_4_m_adds_23_3_ms() -> None:
    """The round-trip part at 4 m and 20 degC is about 23.3 ms (reference.md section 6)."""
    latency = detection_latency([0.05, 0.05], 0, 4.0, 20.0)
    assert latency - 0.05 == pytest.approx(23.3e-3, abs=0.05e-3)  # reference.md sec. 6 budget


@given(range_m=ranges_m, temp_c=temperatures_c)
def test_range_from_tof_inverts_tof_from_range(range_m: float, temp_c: float) -> None:
    """Converting a range to echo time and back returns the range (d = c*t/2, t = 2d/c)."""
    assert range_from_tof(tof_from_range(range_m, temp_c), temp_c) == pytest.approx(
        range_m, rel=1e-12, abs=1e-300)


@given(near_m=ranges_m, far_m=ranges_m, temp_c=temperatures_c)
def test_echo_timeout_never_decreases_with_range(
        near_m: float, far_m: float, temp_c: float) -> None:
    """A farther maximum range never needs a shorter timeout (t = 2R/c)."""
    near_m, far_m = sorted((near_m, far_m))
    assert echo_timeout(near_m, temp_c) <= echo_timeout(far_m, temp_c)


@given(range_m=st.floats(min_value=0.01, max_value=50.0), cold_c=temperatures_c,
       warm_c=temperatures_c)
def test_echo_timeout_decreases_with_temperature(
        range_m: float, cold_c: float, warm_c: float) -> None:
    """Warmer air carries sound faster, so the timeout to a fixed range is shorter (F1)."""
    cold_c, warm_c = sorted((cold_c, warm_c))
    if warm_c - cold_c < 1e-6:
        assert echo_timeout(range_m, warm_c) == pytest.approx(echo_timeout(range_m, cold_c),
                                                              rel=1e-7)
    else:
        assert echo_timeout(range_m, warm_c) < echo_timeout(range_m, cold_c)


NAN = math.nan
INF = math.inf


@pytest.mark.parametrize('call, name', [
    (lambda: speed_of_sound(-300.0), 'temp_c'),
    (lambda: speed_of_sound(-273.15), 'temp_c'),
    (lambda: speed_of_sound(-90.5), 'temp_c'),
    (lambda: speed_of_sound(150.5), 'temp_c'),
    (lambda: speed_of_sound(NAN), 'temp_c'),
    (lambda: speed_of_sound(INF), 'temp_c'),
    (lambda: speed_of_sound(-INF), 'temp_c'),
    (lambda: speed_of_sound('20'), 'temp_c'),
    (lambda: speed_of_sound(True), 'temp_c'),
    (lambda: range_from_tof(-1.0), 'tof_s'),
    (lambda: range_from_tof(NAN), 'tof_s'),
    (lambda: range_from_tof(INF), 'tof_s'),
    (lambda: range_from_tof(0.01, NAN), 'temp_c'),
    (lambda: tof_from_range(-0.1), 'range_m'),
    (lambda: tof_from_range(1.0, 200.0), 'temp_c'),
    (lambda: echo_timeout(-4.0), 'max_range_m'),
    (lambda: echo_timeout(INF), 'max_range_m'),
    (lambda: echo_timeout(NAN), 'max_range_m'),
    (lambda: echo_timeout(4.0, -100.0), 'temp_c'),
    (lambda: blind_range(-1e-3), 'ring_down_s'),
    (lambda: blind_range(NAN), 'ring_down_s'),
    (lambda: blind_range(1e-3, INF), 'temp_c'),
    (lambda: reported_range(-2.0, -10.0, 20.0), 'true_range_m'),
    (lambda: reported_range(2.0, NAN, 20.0), 'true_temp_c'),
    (lambda: reported_range(2.0, -10.0, 999.0), 'assumed_temp_c'),
    (lambda: detection_latency([], 0, 1.0), 'slot_durations_s'),
    (lambda: detection_latency(0.03, 0, 1.0), 'slot_durations_s'),
    (lambda: detection_latency([0.03, NAN], 0, 1.0), 'slot_durations_s'),
    (lambda: detection_latency([0.03, -0.01], 0, 1.0), 'slot_durations_s'),
    (lambda: detection_latency([0.03, INF], 0, 1.0), 'slot_durations_s'),
    (lambda: detection_latency(np.array([0.03, NAN]), 0, 1.0), 'slot_durations_s'),
    (lambda: detection_latency([0.03, 0.03], 2, 1.0), 'sensor_index'),
    (lambda: detection_latency([0.03, 0.03], -1, 1.0), 'sensor_index'),
    (lambda: detection_latency([0.03, 0.03], True, 1.0), 'sensor_index'),
    (lambda: detection_latency([0.03, 0.03], 1.0, 1.0), 'sensor_index'),
    (lambda: detection_latency([0.03, 0.03], 0, -1.0), 'range_m'),
    (lambda: detection_latency([0.03, 0.03], 0, NAN), 'range_m'),
    (lambda: detection_latency([0.03, 0.03], 0, 1.0, -300.0), 'temp_c'),
])
def test_bad_argument_raises_value_error_naming_it(call, name: str) -> None:
    """Each out-of-domain argument raises ValueError whose message names it (design.md)."""
    with pytest.raises(ValueError, match=name):
        call()


def test_bad_argument_message_shows_rule_and_value() -> None:
    """The message names the argument, the rule with its unit and the bad value."""
    with pytest.raises(ValueError) as caught:
        range_from_tof(-1.0)
    assert str(caught.value) == 'tof_s must be a finite number >= 0 s: -1.0'  # brief's example
