"""Generate the demo table ``examples/greenhouse.csv``: a greenhouse climate controller's day log.

The scenario is invented for woodlot's demo. A grower runs twelve compartments (blocks A, B,
C; block C has the oldest glass and heaters) with four crops. Each row is one compartment on
one day of a year: the weather forecast for the day (shared by all compartments), the
grower's settings, the equipment, and two outcomes logged at the end of the day:

- ``alarm``: the climate alarm the controller raised that day, if any (``none``,
  ``overheat``, ``cold``, ``humidity``) — the classification target;
- ``energy_kwh_m2``: heating and lighting energy used per square metre — the regression
  target.

The alarms follow thresholds and interactions a tree ensemble has to find: overheating when
strong sun meets vents held shut (by the grower's limit or by wind), made worse by a firmware
fault with the energy screen drawn; cold when the heat deficit exceeds what an ageing heater
delivers through the compartment's glass; humidity when a full canopy transpires behind closed
vents. Energy is the heat deficit through glass, screen and heater efficiency, plus lamps on
dark days. Missing values: forecast radiation on days the weather feed dropped, heater ages not
entered, screen positions and CO2 targets not logged. ``record`` is a row number (an
identifier, which ``woodlot add`` warns about).

Deterministic for a given ``--seed``; run ``python examples/make_greenhouse.py`` to rewrite the
CSV next to this script.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

COMPARTMENTS = {  # name: (crop, heater age in years at day 0, glass heat-loss factor, firmware)
    "A1": ("tomato", 2.0, 1.00, "fw-3.0"), "A2": ("tomato", 3.5, 1.00, "fw-3.0"),
    "A3": ("cucumber", 2.5, 1.00, "fw-2.3"), "A4": ("lettuce", 4.0, 1.05, "fw-2.3"),
    "B1": ("tomato", 6.0, 1.10, "fw-2.3"), "B2": ("sweet-pepper", 7.5, 1.10, "fw-2.1"),
    "B3": ("sweet-pepper", 8.0, 1.10, "fw-2.1"), "B4": ("cucumber", 9.0, 1.15, "fw-2.3"),
    "C1": ("lettuce", 11.0, 1.30, "fw-2.1"), "C2": ("tomato", 13.0, 1.35, "fw-2.1"),
    "C3": ("cucumber", 12.0, 1.30, "fw-2.3"), "C4": ("sweet-pepper", 14.0, 1.40, "fw-2.1"),
}
SETPOINT = {"tomato": 19.0, "cucumber": 21.0, "sweet-pepper": 20.0, "lettuce": 16.0}
TRANSPIRATION = {"tomato": 1.0, "cucumber": 1.3, "sweet-pepper": 0.8, "lettuce": 0.4}
CYCLE_WEEKS = {"tomato": 46, "cucumber": 12, "sweet-pepper": 44, "lettuce": 6}
LAMPS = {"tomato", "lettuce"}  # crops grown under lamps on dark days
DAYS_LOGGED = 250              # days per compartment: 12 x 250 = 3,000 rows


def sigmoid(x):
    return 1.0 / (1.0 + np.exp(-x))


def weather(rng: np.random.Generator, days: np.ndarray) -> pd.DataFrame:
    """Daily forecast: seasonal temperature with persistent anomalies, sun, wind."""
    season = np.cos(2 * np.pi * (days - 200) / 365)        # +1 in mid July, -1 in mid January
    anomaly = np.zeros(len(days))
    for i in range(1, len(days)):                          # weather spells last several days
        anomaly[i] = 0.75 * anomaly[i - 1] + rng.normal(0, 2.0)
    temp = 10.5 + 8.5 * season + anomaly
    clear_sky = 150 + 130 * season                         # W/m2, daily mean
    cloud = rng.beta(2.0, 2.2, len(days))
    radiation = clear_sky * (1 - 0.8 * cloud) + rng.normal(0, 8, len(days))
    wind = rng.gamma(2.4, 2.0 + 0.8 * (1 - season) / 2, len(days))
    return pd.DataFrame({"day_of_year": days, "outside_temp_c": temp,
                         "radiation_wm2": np.clip(radiation, 5, None), "wind_ms": wind})


def generate(seed: int = 2024) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    days = np.sort(rng.choice(np.arange(1, 366), size=DAYS_LOGGED, replace=False))
    sky = weather(rng, days)
    feed_down = rng.random(len(days)) < 0.04               # radiation forecast missing that day
    rows = []
    for name, (crop, age0, glass, firmware) in COMPARTMENTS.items():
        part = sky.copy()
        part["compartment"] = name
        part["crop"] = crop
        start = rng.integers(0, 7 * CYCLE_WEEKS[crop])
        part["plant_week"] = ((days - start) % (7 * CYCLE_WEEKS[crop])) // 7 + 1
        part["setpoint_c"] = np.round((SETPOINT[crop] + rng.normal(0, 0.7, len(days))) * 2) / 2
        age = age0 + days / 365
        if name == "C2":                                   # heater replaced on day 180
            age = np.where(days >= 180, (days - 180) / 365, age)
        part["heater_age_y"] = age
        part["firmware"] = np.where((days >= 210) & (firmware == "fw-2.1")
                                    & (name in ("B2", "C1")), "fw-3.0", firmware)
        part["glass"] = glass
        rows.append(part)
    df = pd.concat(rows, ignore_index=True)
    n = len(df)
    feed = np.tile(feed_down, len(COMPARTMENTS))
    temp, rad, wind = df.outside_temp_c.to_numpy(), df.radiation_wm2.to_numpy(), df.wind_ms.to_numpy()
    crop = df.crop.to_numpy()

    # The grower's settings follow the weather, with the usual day-to-day variation.
    u = rng.random(n)
    screen = np.where(temp < 7, np.where(u < 0.8, "energy", "open"),
                      np.where(rad > 210, np.where(u < 0.7, "shade", "open"),
                               np.where(u < 0.15, "energy", "open")))
    vent_limit = np.where(wind > 9, rng.integers(4, 11, n) * 5, rng.integers(8, 21, n) * 5)
    co2 = np.select([crop == "lettuce", temp < 8], [500, 900], 700) \
        + rng.choice([-100, 0, 0, 100], n)
    df["screen"] = screen
    df["vent_limit_pct"] = vent_limit
    df["co2_target_ppm"] = co2

    # Alarms: log-odds against "none" for each alarm, then one draw per row.
    fault_bug = (df.firmware.to_numpy() == "fw-2.1") & (screen == "energy") & (rad > 110)
    closed = (1 - vent_limit / 100) + 0.8 * sigmoid((wind - 9) / 1.2)
    z_over = (-4.5 + 5.5 * sigmoid((rad - 165) / 25) * closed * 1.6 + 2.4 * fault_bug
              - 1.3 * (screen == "shade") + 0.15 * (df.setpoint_c.to_numpy() - 19))
    deficit = (df.setpoint_c.to_numpy() - temp - 0.015 * rad) * (1 + 0.05 * wind) \
        * np.where(screen == "energy", 0.7, 1.0) * df.glass.to_numpy()
    capacity = 21.0 / (1 + 0.06 * df.heater_age_y.to_numpy())
    z_cold = -5.0 + 0.9 * np.clip(deficit - capacity, -6, None)
    canopy = np.array([TRANSPIRATION[c] for c in crop]) * np.minimum(df.plant_week.to_numpy(), 10) / 10
    shut = np.maximum(sigmoid((8 - temp) / 1.5), 1 - vent_limit / 100) + 0.6 * (screen == "energy")
    z_hum = -6.7 + 4.2 * canopy * shut + 1.3 * (rad < 70) + 0.7 * (co2 >= 900) * shut
    logits = np.column_stack([np.zeros(n), z_over, z_cold, z_hum])
    p = np.exp(logits - logits.max(axis=1, keepdims=True))
    p /= p.sum(axis=1, keepdims=True)
    draw = (p.cumsum(axis=1) < rng.random(n)[:, None]).sum(axis=1)
    df["alarm"] = np.array(["none", "overheat", "cold", "humidity"])[np.minimum(draw, 3)]

    # Energy: heat through glass and screen, delivered by a heater losing efficiency with age,
    # plus lamps on dark days for the lit crops, plus CO2 dosing; multiplicative noise.
    heat = np.clip(df.setpoint_c.to_numpy() - temp - 0.012 * rad, 0, None) * (1 + 0.03 * wind) \
        * df.glass.to_numpy() * np.select([screen == "energy", screen == "shade"], [0.65, 0.9], 1.0)
    efficiency = 0.93 - 0.014 * df.heater_age_y.to_numpy()
    lamps = np.isin(crop, list(LAMPS)) * np.clip(110 - rad, 0, None) / 110 * 0.9
    energy = (0.11 * heat / efficiency + lamps + 0.0003 * (co2 - 400)) \
        * rng.lognormal(0, 0.08, n) + (df.alarm.to_numpy() == "cold") * 0.25
    df["energy_kwh_m2"] = np.round(energy, 3)

    # What the log does not hold.
    df.loc[feed, "radiation_wm2"] = np.nan
    df.loc[rng.random(n) < 0.06, "heater_age_y"] = np.nan
    df.loc[rng.random(n) < 0.03, "screen"] = None
    df.loc[rng.random(n) < 0.02, "co2_target_ppm"] = np.nan

    df = df.sort_values(["day_of_year", "compartment"], kind="stable").reset_index(drop=True)
    df.insert(0, "record", np.arange(1, n + 1))
    out = pd.DataFrame({
        "record": df.record, "day_of_year": df.day_of_year, "compartment": df.compartment,
        "crop": df.crop, "plant_week": df.plant_week,
        "outside_temp_c": df.outside_temp_c.round(1), "radiation_wm2": df.radiation_wm2.round(),
        "wind_ms": df.wind_ms.round(1), "setpoint_c": df.setpoint_c, "screen": df.screen,
        "vent_limit_pct": df.vent_limit_pct, "co2_target_ppm": df.co2_target_ppm,
        "firmware": df.firmware, "heater_age_y": df.heater_age_y.round(1),
        "alarm": df.alarm, "energy_kwh_m2": df.energy_kwh_m2,
    })
    for col in ("radiation_wm2", "co2_target_ppm"):  # whole numbers with gaps
        out[col] = out[col].astype("Int64")
    return out


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seed", type=int, default=2024)
    ap.add_argument("--out", type=Path, default=Path(__file__).with_name("greenhouse.csv"))
    args = ap.parse_args(argv)
    table = generate(args.seed)
    table.to_csv(args.out, index=False)
    shares = table.alarm.value_counts(normalize=True).round(3).to_dict()
    print(f"wrote {args.out}: {len(table)} rows, {table.shape[1]} columns; alarms {shares}")


if __name__ == "__main__":
    main()
