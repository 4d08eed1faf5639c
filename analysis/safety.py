"""Indicative RF-exposure estimate for chamber setups (README, RF safety).

Far-field power density S = P G / (4 pi r^2) against the ICNIRP 2020 whole-body reference
levels (Table 5; values from memory, as README, RF safety gives them). The formula holds
only beyond the antenna's far-field distance 2 D^2 / lambda (D the aperture, given or
derived from the gain with an assumed aperture efficiency); nearer, the estimate warns that
it does not apply. The result is indicative only: its verdict reads "below (or above) the
reference level in this far-field estimate" and it never states that a setup is compliant;
local regulations and the site's RF safety rules decide.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .constants import C0
from .errors import InputError

F_MIN_HZ = 30e6
F_MAX_HZ = 300e9
POPULATIONS = ("general public", "occupational")
_ALIASES = {"general public": "general public", "public": "general public", "general": "general public",
            "occupational": "occupational", "worker": "occupational", "workers": "occupational"}
APERTURE_EFFICIENCY = 0.5  # assumed when the aperture is derived from the gain (horns: about 0.5, from memory)
CAUTION = ("RF exposure: a VNA alone radiates milliwatts, but power amplifiers and high-gain horns can "
           "exceed exposure reference levels near the antenna. Estimates here are indicative only; "
           "local regulations and the site's RF safety rules apply.")


def _finite(value, name: str) -> float:
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a number, got {value!r}") from None
    if not math.isfinite(x):
        raise InputError(f"{name} must be finite, got {value!r}")
    return x


def population_label(population: str) -> str:
    """'general public' or 'occupational' (accepts 'public', 'worker'); InputError otherwise."""
    key = _ALIASES.get(str(population).strip().lower())
    if key is None:
        raise InputError(f"population must be 'general public' or 'occupational', got {population!r}")
    return key


def power_density_w_m2(p_dbm, gain_dbi, distance_m) -> float:
    """Far-field power density S = P G / (4 pi r^2) in W/m^2 (P in dBm, G in dBi, r in m)."""
    p_w = 10 ** ((_finite(p_dbm, "transmit power (dBm)") - 30.0) / 10.0)
    g = 10 ** (_finite(gain_dbi, "antenna gain (dBi)") / 10.0)
    r = _finite(distance_m, "distance (m)")
    if r <= 0:
        raise InputError(f"distance must be positive, got {distance_m!r} m")
    return p_w * g / (4.0 * math.pi * r * r)


def reference_level_w_m2(frequency_hz, population="general public") -> float:
    """ICNIRP 2020 Table 5 whole-body reference level (W/m^2) at a frequency in Hz (30 MHz-300 GHz).

    General public: 2 (30-400 MHz), f_MHz/200 (400-2000 MHz), 10 (2-300 GHz);
    occupational: 10, f_MHz/40, 50 (values from memory).
    """
    f = _finite(frequency_hz, "frequency (Hz)")
    if not F_MIN_HZ <= f <= F_MAX_HZ:
        raise InputError(f"frequency {f / 1e9:g} GHz is outside 30 MHz-300 GHz, the range of the "
                         "far-field reference levels used here")
    pop = population_label(population)
    f_mhz = f / 1e6
    if pop == "general public":
        return 2.0 if f_mhz < 400 else (f_mhz / 200.0 if f_mhz < 2000 else 10.0)
    return 10.0 if f_mhz < 400 else (f_mhz / 40.0 if f_mhz < 2000 else 50.0)


def aperture_from_gain_m(gain_dbi, frequency_hz, efficiency: float = APERTURE_EFFICIENCY) -> float:
    """Aperture diameter D (m) of an antenna of gain G (dBi): G = efficiency (pi D / lambda)^2,
    so D = (lambda / pi) sqrt(G / efficiency). The efficiency is an assumption (default 0.5,
    about that of a horn; from memory)."""
    g = 10 ** (_finite(gain_dbi, "antenna gain (dBi)") / 10.0)
    f = _finite(frequency_hz, "frequency (Hz)")
    eff = _finite(efficiency, "aperture efficiency")
    if f <= 0 or not 0 < eff <= 1:
        raise InputError(f"frequency must be positive and the aperture efficiency in (0, 1], got {f:g} Hz, {eff:g}")
    return (C0 / f) / math.pi * math.sqrt(g / eff)


def far_field_distance_m(aperture_m, frequency_hz) -> float:
    """Far-field (Fraunhofer) distance 2 D^2 / lambda (m) of an aperture D (m): the far-field
    power density formula holds beyond it (common practice)."""
    d = _finite(aperture_m, "aperture (m)")
    if d <= 0:
        raise InputError(f"aperture must be positive, got {aperture_m!r} m")
    return 2.0 * d * d * _finite(frequency_hz, "frequency (Hz)") / C0


@dataclass(frozen=True)
class ExposureEstimate:
    power_density_w_m2: float
    reference_level_w_m2: float
    ratio: float  # power density / reference level (indicative)
    population: str
    frequency_hz: float
    distance_m: float = math.nan
    aperture_m: float = math.nan  # antenna aperture D used for the far-field distance
    aperture_derived: bool = True  # True when D comes from the gain and APERTURE_EFFICIENCY
    far_field_m: float = math.nan  # 2 D^2 / lambda

    @property
    def in_near_field(self) -> bool:
        """True when the distance is shorter than the far-field distance: the estimate does not apply."""
        return self.distance_m < self.far_field_m

    @property
    def verdict(self) -> str:
        side = "above" if self.ratio > 1 else "below"
        return f"{side} the reference level in this far-field estimate"

    def aperture_note(self) -> str:
        how = (f"derived from the gain assuming an aperture efficiency of {APERTURE_EFFICIENCY:g}"
               if self.aperture_derived else "as given")
        return f"aperture {self.aperture_m:.3g} m ({how}), far-field distance 2 D²/λ = {self.far_field_m:.3g} m"

    def near_field_warning(self) -> str | None:
        if not self.in_near_field:
            return None
        return (f"{self.distance_m:g} m is inside the antenna's near field ({self.aperture_note()}): the far-field "
                f"formula does not hold there, so this estimate is not valid at this distance; have the exposure "
                f"assessed by qualified people")

    def text(self) -> str:
        out = (f"{self.power_density_w_m2:.3g} W/m^2 against a reference level of {self.reference_level_w_m2:.3g} "
               f"W/m^2 ({self.population}): {100 * self.ratio:.3g} % of it, {self.verdict}. Indicative only, "
               f"not a statement of compliance.")
        warning = self.near_field_warning()
        return out + (f" Warning: {warning}." if warning else "")


def estimate_exposure(p_dbm, gain_dbi, distance_m, frequency_hz, population="general public",
                      aperture_m=None) -> ExposureEstimate:
    """Power density, reference level and their ratio (indicative; not a compliance statement), with
    the far-field distance of the aperture (``aperture_m``, else derived from the gain)."""
    s = power_density_w_m2(p_dbm, gain_dbi, distance_m)
    pop = population_label(population)
    ref = reference_level_w_m2(frequency_hz, pop)
    derived = aperture_m is None
    d = aperture_from_gain_m(gain_dbi, frequency_hz) if derived else _finite(aperture_m, "aperture (m)")
    return ExposureEstimate(s, ref, s / ref, pop, float(frequency_hz), float(distance_m), d, derived,
                            far_field_distance_m(d, frequency_hz))


def distance_for_level_m(p_dbm, gain_dbi, level_w_m2) -> float:
    """Distance (m) at which the far-field density falls to ``level_w_m2``: sqrt(P G / (4 pi S))."""
    return math.sqrt(power_density_w_m2(p_dbm, gain_dbi, 1.0) / _finite(level_w_m2, "level (W/m^2)"))


def power_density_curve(p_dbm, gain_dbi, distance_m) -> np.ndarray:
    """Vectorised S(r) in W/m^2 for an array of distances (m)."""
    r = np.asarray(distance_m, dtype=float)
    return power_density_w_m2(p_dbm, gain_dbi, 1.0) / r ** 2
