"""RF-exposure estimator (cloakrcs.safety) against the far-field formula and ICNIRP 2020 Table 5."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, strategies as st

from cloakrcs.errors import InputError
from cloakrcs.safety import (distance_for_level_m, estimate_exposure, power_density_w_m2,
                             reference_level_w_m2)


def test_power_density_one_watt_isotropic_at_one_metre():
    # Far-field power density S = P G / (4 pi r^2) (Balanis, Antenna Theory, ch. 2; eq. number from memory):
    # 30 dBm = 1 W, 0 dBi, 1 m -> 1 / (4 pi) W/m^2
    assert power_density_w_m2(30.0, 0.0, 1.0) == pytest.approx(1 / (4 * math.pi), rel=1e-12)


def test_power_density_amplifier_and_horn():
    # 40 dBm = 10 W, 20 dBi = 100, 2 m: 10 * 100 / (4 pi 4) = 19.894 W/m^2 (same formula, by hand)
    assert power_density_w_m2(40.0, 20.0, 2.0) == pytest.approx(1000 / (16 * math.pi), rel=1e-12)


@given(st.floats(-30, 60), st.floats(-10, 40), st.floats(0.05, 100))
def test_inverse_square_law(p, g, r):
    # inverse-square spreading of a far field (Balanis, Antenna Theory, ch. 2)
    assert power_density_w_m2(p, g, 2 * r) == pytest.approx(power_density_w_m2(p, g, r) / 4, rel=1e-9)


@pytest.mark.parametrize("f_hz, public, worker", [
    # ICNIRP 2020 guidelines, Table 5 (whole body, far field; values from memory as in README, RF safety):
    (100e6, 2.0, 10.0),       # 30-400 MHz: 2 and 10 W/m^2
    (900e6, 4.5, 22.5),       # 400-2000 MHz: f_MHz/200 and f_MHz/40
    (1.8e9, 9.0, 45.0),
    (10e9, 10.0, 50.0),       # 2-300 GHz: 10 and 50 W/m^2
    (300e9, 10.0, 50.0),
    (30e6, 2.0, 10.0),
])
def test_reference_levels(f_hz, public, worker):
    assert reference_level_w_m2(f_hz, "general public") == pytest.approx(public)
    assert reference_level_w_m2(f_hz, "occupational") == pytest.approx(worker)


def test_reference_levels_are_continuous_at_the_breakpoints():
    # ICNIRP 2020 Table 5 (from memory): f/200 meets 2 at 400 MHz and 10 at 2000 MHz
    for f in (400e6, 2000e6):
        for pop in ("general public", "occupational"):
            assert reference_level_w_m2(f * (1 - 1e-9), pop) == pytest.approx(reference_level_w_m2(f, pop), rel=1e-6)


def test_estimate_ratio_and_distance():
    e = estimate_exposure(40.0, 20.0, 2.0, 10e9, "public")
    assert e.population == "general public"
    assert e.ratio == pytest.approx(1000 / (16 * math.pi) / 10.0)
    # distance where S equals the level: r = sqrt(P G / (4 pi S)) (same far-field formula)
    r = distance_for_level_m(40.0, 20.0, 10.0)
    assert r == pytest.approx(math.sqrt(1000 / (4 * math.pi * 10.0)))
    assert "Indicative" in e.text()


@pytest.mark.parametrize("call", [
    lambda: reference_level_w_m2(10e6, "general public"),
    lambda: reference_level_w_m2(400e9, "occupational"),
    lambda: reference_level_w_m2(1e9, "astronaut"),
    lambda: power_density_w_m2(30, 10, 0.0),
    lambda: power_density_w_m2(float("nan"), 10, 1.0),
    lambda: power_density_w_m2("lots", 10, 1.0),
])
def test_bad_input_is_one_line_input_error(call):
    with pytest.raises(InputError) as err:
        call()
    assert "\n" not in str(err.value)
