"""Simulated recordings written as EDF, WFDB, CSV, NumPy and Parquet files with equal content.

All formats hold the same 16-bit samples: digital value d means ``STEP_N * (d + OFFSET)``
newtons (EDF: physical range from ``STEP_N * (OFFSET - 32768)`` to
``STEP_N * (OFFSET + 32767)`` over the digital range -32768..32767; WFDB: ``adc_gain``
1/STEP_N and ``baseline`` -OFFSET; CSV and the others: those physical values in full
precision). The traces come from ``simulation`` (invented data, for the tests).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from simulation import SimulationSettings, simulate

STEP_N = 0.001
OFFSET = 732_768
#: EDF physical range: STEP_N * (OFFSET - 32768) and STEP_N * (OFFSET + 32767), as written.
PHYSICAL_RANGE_N = (700.0, 765.535)
LABEL = "seat_load"


def digital_trace(seed: int, *, duration_s: float = 60.0, fs_hz: float = 100.0) -> np.ndarray:
    """The simulated seat load as 16-bit digital values (int64 array)."""
    recording = simulate(SimulationSettings(duration_s=duration_s, fs_hz=fs_hz, seed=seed))
    digital = np.round(recording.channels[0] / STEP_N) - OFFSET
    assert digital.min() > -32768 and digital.max() < 32767
    return digital.astype(np.int64)


def physical(digital: np.ndarray) -> np.ndarray:
    return STEP_N * (digital + OFFSET)


def write_edf(path: Path, digital: np.ndarray, fs_hz: float, *, label: str = LABEL,
              unit: str = "N") -> Path:
    import edfio

    signal = edfio.EdfSignal(
        physical(digital), fs_hz, label=label, physical_dimension=unit,
        physical_range=PHYSICAL_RANGE_N,
    )
    edfio.Edf([signal]).write(path)
    return path


def write_wfdb(folder: Path, name: str, digital: np.ndarray, fs_hz: float, *,
               label: str = LABEL, unit: str = "N") -> Path:
    import wfdb

    wfdb.wrsamp(name, fs=fs_hz, units=[unit], sig_name=[label],
                d_signal=digital.reshape(-1, 1).astype(np.int16), fmt=["16"],
                adc_gain=[1.0 / STEP_N], baseline=[-OFFSET], write_dir=str(folder))
    return folder / f"{name}.hea"


def write_csv(path: Path, values: np.ndarray, labels: list[str]) -> Path:
    table = np.column_stack([values]) if values.ndim == 2 else values.reshape(-1, 1)
    lines = [",".join(labels)] + [",".join(repr(float(v)) for v in row) for row in table]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path
