"""An invented demo scenario: sensor readings from a fleet of machine tools.

Nothing here is measured data; the responses are made up to look plausible and
to give embeddings a known two-dimensional truth to recover.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ._common import noise_param, seed_param, size_param
from ._registry import register_dataset
from ._types import Dataset


@dataclass(frozen=True)
class SensorChannel:
    """One sensor: how its reading responds to load ``L`` and wear ``W`` (both in [0, 1]).

    Parameters
    ----------
    name : str
        Column name, with the unit as suffix.
    response : callable
        ``response(L, W) -> reading`` without noise.
    noise_scale : float
        Standard deviation of the sensor noise at ``noise = 1``, in the channel's unit.
    """

    name: str
    response: Callable[[np.ndarray, np.ndarray], np.ndarray]
    noise_scale: float


# Each response is monotone or smoothly curved in load and wear, with a few
# interactions (wear hurts more under load), so the 12 readings lie on a bent
# two-dimensional surface in 12-D.
SENSOR_CHANNELS: tuple[SensorChannel, ...] = (
    SensorChannel("bearing_temp_C", lambda L, W: 35 + 30 * L**1.3 + 18 * W**2 + 8 * L * W, 1.5),
    SensorChannel("vibration_rms_mm_s", lambda L, W: 0.8 + 2.5 * L + 6 * W**3 * (0.5 + L), 0.15),
    SensorChannel("spindle_current_A", lambda L, W: 4 + 22 * L + 3 * L * W, 0.6),
    SensorChannel("coolant_flow_L_min", lambda L, W: 18 - 5 * W**1.5 - 2 * L, 0.4),
    SensorChannel("acoustic_level_dBA", lambda L, W: 62 + 10 * np.log10(1 + 9 * L) + 6 * W**2, 0.8),
    SensorChannel("power_factor", lambda L, W: 0.55 + 0.35 * (1 - np.exp(-3 * L)) - 0.05 * W, 0.01),
    SensorChannel("oil_particles_ppm", lambda L, W: 5 + 120 * W**2.5 + 10 * L * W, 3.0),
    SensorChannel("winding_temp_C", lambda L, W: 40 + 45 * L**1.5 + 5 * W, 1.5),
    SensorChannel("shaft_speed_rpm", lambda L, W: 1500 - 60 * L - 80 * L * W, 4.0),
    SensorChannel("hydraulic_pressure_bar", lambda L, W: 120 + 40 * L - 25 * W**2, 1.5),
    SensorChannel("cycle_time_s", lambda L, W: 18 + 10 / (0.3 + L) + 6 * W**2, 0.5),
    SensorChannel("vibration_kurtosis", lambda L, W: 3 + 6 * W**4 + 0.5 * L, 0.2),
)

REGIMES = ("light_duty", "production", "peak_load", "service_due")


def operating_regime(load: np.ndarray, wear: np.ndarray) -> np.ndarray:
    """Name the regime of each machine from its hidden load and wear.

    Rules, first match wins: wear >= 0.6 is ``service_due``; load < 0.4 is
    ``light_duty``; load >= 0.75 is ``peak_load``; anything else is ``production``.
    With the default draws the shares are about 20, 22, 38 and 19 % for
    service_due, light_duty, production and peak_load.
    """
    return np.select(
        [wear >= 0.6, load < 0.4, load >= 0.75],
        ["service_due", "light_duty", "peak_load"],
        default="production",
    )


@register_dataset(
    "machine_fleet",
    params=(
        size_param(600, 10),
        noise_param(1.0, "multiplier of each sensor's typical noise (0 = noiseless readings)"),
        seed_param(),
    ),
    description="invented demo: 12 sensor channels of machine tools driven by hidden load and wear; "
    "labels = operating regime",
    source="invented by foldbench (no measured data)",
    # load, wear, 12 channels, their noise and the sum, latent, regime names: about 48 float64 values a row
    footprint=lambda p: 8 * 48 * p["n"],
)
def machine_fleet(n: int = 600, noise: float = 1.0, seed: int = 0) -> Dataset:
    """Sensor snapshots from an invented fleet of machine tools.

    Each row is one machine at one moment.  Two hidden conditions drive every
    reading:

    * **load**, the fraction of rated load, drawn from Beta(2, 1.6) (most
      machines run busy);
    * **wear**, from new (0) to due for overhaul (1), drawn from Beta(1.4, 2.2)
      (most machines are in fair condition).

    Twelve channels respond to them through the curved functions in
    :data:`SENSOR_CHANNELS`: bearing and winding temperatures, vibration RMS
    and kurtosis, spindle current, coolant flow, acoustic level, power factor,
    oil particle count, shaft speed, hydraulic pressure and cycle time.  Each
    channel gets independent Gaussian noise with standard deviation
    ``noise * noise_scale``.  The label is the operating regime
    (:func:`operating_regime`), a function of load and wear only.

    Parameters
    ----------
    n : int
        Number of machines (rows).
    noise : float
        Multiplier of the sensor noise; 0 makes readings an exact function of
        the hidden conditions.
    seed : int
        Seed of the random generator.

    Returns
    -------
    Dataset
        ``X`` of shape (n, 12) in the channels' own units (not standardised),
        ``labels`` from :data:`REGIMES`, ``latent`` of shape (n, 2) = (load, wear).
        ``info["feature_names"]`` lists the channel names.
    """
    rng = np.random.default_rng(seed)
    load = rng.beta(2.0, 1.6, size=n)
    wear = rng.beta(1.4, 2.2, size=n)
    X = np.column_stack([ch.response(load, wear) for ch in SENSOR_CHANNELS]).astype(np.float64)
    if noise > 0:
        scales = np.array([ch.noise_scale for ch in SENSOR_CHANNELS])
        X = X + rng.normal(size=X.shape) * (noise * scales)
    return Dataset(
        name="machine_fleet",
        X=X,
        labels=operating_regime(load, wear),
        latent=np.column_stack([load, wear]),
        info={
            "source": "invented",
            "feature_names": [ch.name for ch in SENSOR_CHANNELS],
            "latent_names": ["load", "wear"],
            "label_names": list(REGIMES),
            "noise": float(noise),
            "seed": int(seed),
        },
    )
