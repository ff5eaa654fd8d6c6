"""The demo scenario: an evening trace from a four-load-cell plate under an armchair.

An assisted-living provider has a plate with four load cells under a
resident's armchair; each evening a short seated trace is recorded. The trace
here is synthesised by :mod:`simulation` (invented data, for the demo
only) with a fixed seed, so every run sends the same request.
"""

from __future__ import annotations

from typing import Any

from simulation import SimulationSettings, simulate

#: Settings of the demo trace: two minutes at 250 Hz, four cells, a 72 kg resident.
DEMO_SETTINGS = SimulationSettings(
    duration_s=120.0,
    fs_hz=250.0,
    heart_rate_bpm=66.0,
    breathing_rate_per_min=13.0,
    n_channels=4,
    body_mass_kg=72.0,
    support="cushion",
    seed=20261202,
)
#: Decimals kept in the demo's JSON samples (1 mN on a load of about 180 N per cell).
DEMO_DECIMALS = 3


def demo_request_body() -> dict[str, Any]:
    """The body of the demo's ``POST /v1/analyses`` request."""
    recording = simulate(DEMO_SETTINGS)
    positions = recording.positions_m or (None,) * len(recording.channels)
    channels = []
    for label, trace, position in zip(recording.labels, recording.channels, positions, strict=True):
        channel: dict[str, Any] = {
            "label": label,
            "quantity": recording.quantity,
            "unit": recording.unit,
            "samples": [round(float(v), DEMO_DECIMALS) for v in trace],
        }
        if position is not None:
            channel["position_m"] = [float(position[0]), float(position[1])]
        channels.append(channel)
    return {
        "sampling_rate_hz": recording.fs_hz,
        "channels": channels,
        "subject": {"body_mass_kg": DEMO_SETTINGS.body_mass_kg},
        "recording": {
            "placement": "seat",
            "posture": "seated",
            "device_id": "armchair-plate-demo",
        },
    }
