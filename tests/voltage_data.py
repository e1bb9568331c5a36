"""Readings with terminal voltages, built for the tests (sample_data/ has none)."""

import numpy as np
import pandas as pd

#: Machine of sample_data/machines.toml that the voltage readings belong to.
MACHINE_ID = "centre-twin-disc"
#: The line the readings are drawn from: I = q f + I0 - V / R (SI units).
CHARGE_PER_REV_C = 60e-9
OFFSET_A = 0.5e-6
LEAKAGE_OHM = 40e9


def voltage_readings(seed: int = 7, count: int = 30, speed_varies: bool = True,
                     noise_a: float = 0.05e-6) -> pd.DataFrame:
    """Readings of one session whose current falls along a straight load line, plus noise."""
    rng = np.random.default_rng(seed)
    speed_rpm = rng.uniform(180, 300, count) if speed_varies else np.full(count, 240.0)
    voltage_kv = rng.uniform(2, 20, count)
    current_a = (CHARGE_PER_REV_C * speed_rpm / 60 + OFFSET_A - voltage_kv * 1e3 / LEAKAGE_OHM
                 + rng.normal(0, noise_a, count))
    times = pd.date_range("2026-04-01T10:00:00+02:00", periods=count, freq="20s")
    return pd.DataFrame({
        "machine": MACHINE_ID,
        "session": "terminals charged",
        "time": times.strftime("%Y-%m-%dT%H:%M:%S%z").str.replace(r"(\d\d)$", r":\1",
                                                                     regex=True),
        "speed [rpm]": speed_rpm.round(2),
        "current [uA]": (current_a * 1e6).round(4),
        "voltage [kV]": voltage_kv.round(3),
        "rh [%]": 45.0,
        "temperature [degC]": 20.0,
        "pressure [hPa]": 1013.0,
    })


def write_voltage_readings(path, **options) -> str:
    """Write :func:`voltage_readings` as CSV; return the path as text."""
    voltage_readings(**options).to_csv(path, index=False)
    return str(path)
