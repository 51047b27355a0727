"""Invented demo scenarios, generated from a seed.

``greenhouse``: a grower with several glasshouses models weekly tomato yield
per bed from climate and feeding records.  The table carries the same
information twice on purpose: day and night temperature beside their mean (an
exact alias), the day temperature again in °F (an exact alias up to an
intercept), light hours beside a daily light sum that nearly tracks them, and a
vapour-pressure deficit computed from temperature and humidity.

``grading``: the same grower's packhouse grades each harvested batch; the
yes/no question is whether a batch makes the top grade.  Its columns overlap
too: firmness in newtons and again in decanewtons (an exact alias), mean
temperature beside day and night (an exact alias), the sugar/acid ratio beside
sugar and acidity (a near-dependency), and a colour index that nearly tracks
the red share of the skin.

``sensor_line``: a larger scenario for benchmarks: a processing line whose many
sensors follow a few hidden drivers, recorded in production batches (groups).

Nothing here describes real people, companies or datasets.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

GREENHOUSE_SEED = 20261201
VARIETIES = ("Carmine", "Sunberry", "Ledger")


def saturation_vapour_pressure_kpa(temp_c):
    """Tetens' formula for saturation vapour pressure over water (kPa)."""
    return 0.6108 * np.exp(17.27 * temp_c / (temp_c + 237.3))


def greenhouse(seed: int = GREENHOUSE_SEED, houses: int = 8, beds: int = 12, weeks: int = 6) -> pd.DataFrame:
    """Weekly records per bed; one row per bed and week.

    Returns
    -------
    pandas.DataFrame
        Columns in the order of ``sample_projects/README.md``.  A few cells are
        left empty on purpose (a sensor outage, a missed weighing) so that the
        tool has rows to exclude and report.
    """
    rng = np.random.default_rng(seed)
    n = houses * beds * weeks
    house = np.repeat(np.arange(houses), beds * weeks)
    bed = np.tile(np.repeat(np.arange(beds), weeks), houses)
    week = np.tile(np.arange(weeks), houses * beds)
    house_names = np.array([f"GH{h + 1:02d}" for h in range(houses)])
    # Each glasshouse has its own climate set-points and its own yield level.
    house_day = rng.normal(23.5, 1.0, houses)
    house_night = rng.normal(17.0, 0.8, houses)
    house_level = rng.normal(0.0, 0.06, houses)
    season = np.linspace(-1, 1, weeks)[week]
    day_temp = house_day[house] + 0.8 * season + rng.normal(0, 0.7, n)
    night_temp = house_night[house] + 0.5 * season + rng.normal(0, 0.6, n)
    mean_temp = (day_temp + night_temp) / 2.0
    day_temp_f = day_temp * 9.0 / 5.0 + 32.0
    light_hours = np.clip(13.0 + 1.5 * season + rng.normal(0, 0.6, n), 9.0, 18.0)
    ppfd = rng.normal(520.0, 9.0, n)  # µmol/m²/s, lamps plus sun, fairly steady
    light_sum = light_hours * ppfd * 3600e-6  # mol/m²/day
    humidity = np.clip(rng.normal(74.0, 6.0, n), 50.0, 95.0)
    vpd = saturation_vapour_pressure_kpa(day_temp) * (1.0 - humidity / 100.0)
    co2 = np.clip(rng.normal(780.0, 110.0, n), 420.0, 1200.0)
    irrigation = np.clip(rng.normal(4.2, 0.7, n) + 0.25 * (day_temp - 23.5), 1.5, 7.5)
    ec = np.clip(rng.normal(3.0, 0.35, n), 1.8, 4.5)
    variety_of_bed = rng.integers(0, len(VARIETIES), size=(houses, beds))
    variety = np.array(VARIETIES)[variety_of_bed[house, bed]]
    plants = rng.integers(22, 41, size=(houses, beds))[house, bed]
    variety_effect = np.array([0.0, -0.08, 0.05])[variety_of_bed[house, bed]]
    yield_kg = (
        0.92
        + house_level[house]
        + variety_effect
        + 0.035 * (mean_temp - 20.2)
        - 0.006 * (day_temp - night_temp - 6.5) ** 2
        + 0.010 * (light_sum - 24.0)
        - 0.05 * (vpd - 0.75)
        + 0.00018 * (co2 - 780.0)
        + 0.020 * (irrigation - 4.2)
        - 0.030 * (ec - 3.0) ** 2
        + rng.normal(0, 0.05, n) / np.sqrt(plants / 30.0)
    )
    frame = pd.DataFrame(
        {
            "glasshouse": house_names[house],
            "bed": [f"{house_names[h]}-B{b + 1:02d}" for h, b in zip(house, bed)],
            "week": week + 1,
            "variety": variety,
            "plants_per_bed": plants,
            "day_temp_c": day_temp.round(2),
            "night_temp_c": night_temp.round(2),
            "mean_temp_c": None,
            "day_temp_f": None,
            "light_hours": light_hours.round(2),
            "light_sum_mol_m2": light_sum.round(3),
            "humidity_pct": humidity.round(1),
            "vpd_kpa": vpd.round(4),
            "co2_ppm": co2.round(0),
            "irrigation_l_m2": irrigation.round(2),
            "ec_ms_cm": ec.round(2),
            "yield_kg_m2": yield_kg.round(4),
        }
    )
    # Derived columns from the rounded values, so the aliases stay exact in the file.
    frame["mean_temp_c"] = (frame["day_temp_c"] + frame["night_temp_c"]) / 2.0
    frame["day_temp_f"] = frame["day_temp_c"] * 9.0 / 5.0 + 32.0
    # A sensor outage and a missed weighing: rows the tool must exclude and report.
    frame.loc[rng.choice(n, 3, replace=False), "ec_ms_cm"] = np.nan
    frame.loc[rng.choice(n, 2, replace=False), "yield_kg_m2"] = np.nan
    return frame


#: Roles of the greenhouse sample project.
GREENHOUSE_ROLES = {
    "target": "yield_kg_m2",
    "predictors": [
        "variety", "day_temp_c", "night_temp_c", "mean_temp_c", "day_temp_f", "light_hours",
        "light_sum_mol_m2", "humidity_pct", "vpd_kpa", "co2_ppm", "irrigation_l_m2", "ec_ms_cm",
    ],
    "categorical": [],
    "weights": "plants_per_bed",
    "groups": "glasshouse",
}


GRADING_SEED = 20261203


def grading(seed: int = GRADING_SEED, houses: int = 8, batches: int = 60) -> pd.DataFrame:
    """One row per harvested batch: packhouse measurements and whether it made the top grade.

    Returns
    -------
    pandas.DataFrame
        ``top_grade`` is 'top' or 'standard' (about a third 'top').  A few cells
        are empty on purpose (a refractometer outage, an ungraded batch).
    """
    rng = np.random.default_rng(seed)
    n = houses * batches
    house = np.repeat(np.arange(houses), batches)
    house_names = np.array([f"GH{h + 1:02d}" for h in range(houses)])
    house_level = rng.normal(0.0, 0.35, houses)
    variety_idx = rng.integers(0, len(VARIETIES), n)
    day_temp = rng.normal(23.5, 1.0, houses)[house] + rng.normal(0, 0.8, n)
    night_temp = rng.normal(17.0, 0.8, houses)[house] + rng.normal(0, 0.6, n)
    days = np.clip(rng.normal(58.0, 4.0, n), 45.0, 72.0).round(0)
    brix = np.clip(4.8 + 0.06 * (days - 58.0) + np.array([0.0, 0.4, -0.2])[variety_idx] + rng.normal(0, 0.45, n),
                   3.0, 8.0)
    acidity = np.clip(0.42 - 0.004 * (days - 58.0) + rng.normal(0, 0.05, n), 0.25, 0.65)
    firmness = np.clip(rng.normal(32.0, 4.0, n) - 0.25 * (days - 58.0), 18.0, 45.0)
    red_share = np.clip(78.0 + 0.9 * (days - 58.0) + rng.normal(0, 6.0, n), 40.0, 100.0)
    colour = 0.21 * red_share + rng.normal(0, 0.6, n)  # a hue score the grader's camera gives
    eta = (-1.1 + house_level[house] + 1.1 * (brix - 5.0) - 4.0 * (acidity - 0.42) + 0.12 * (firmness - 32.0)
           + 0.04 * (red_share - 78.0) - 0.12 * (day_temp - night_temp - 6.5) ** 2)
    top = rng.random(n) < 1.0 / (1.0 + np.exp(-eta))
    frame = pd.DataFrame({
        "glasshouse": house_names[house],
        "batch": [f"{house_names[h]}-{i + 1:03d}" for h, i in zip(house, np.tile(np.arange(batches), houses))],
        "variety": np.array(VARIETIES)[variety_idx],
        "days_to_harvest": days,
        "day_temp_c": day_temp.round(2),
        "night_temp_c": night_temp.round(2),
        "mean_temp_c": None,
        "brix": brix.round(2),
        "acidity_pct": acidity.round(3),
        "sugar_acid_ratio": None,
        "firmness_n": firmness.round(2),
        "firmness_dan": None,
        "red_share_pct": red_share.round(1),
        "colour_index": colour.round(2),
        "top_grade": np.where(top, "top", "standard"),
    })
    frame["mean_temp_c"] = (frame["day_temp_c"] + frame["night_temp_c"]) / 2.0
    frame["sugar_acid_ratio"] = (frame["brix"] / frame["acidity_pct"]).round(3)
    # Decanewtons: a tenth of the newton reading, exact in the written file.
    frame["firmness_dan"] = (frame["firmness_n"] / 10.0).round(3)
    frame.loc[rng.choice(n, 3, replace=False), "brix"] = np.nan
    frame.loc[rng.choice(n, 2, replace=False), "top_grade"] = None
    return frame


#: Roles of the grading sample project (a yes/no outcome: 'top' counts as yes).
GRADING_ROLES = {
    "target": "top_grade",
    "predictors": [
        "variety", "days_to_harvest", "day_temp_c", "night_temp_c", "mean_temp_c", "brix", "acidity_pct",
        "sugar_acid_ratio", "firmness_n", "firmness_dan", "red_share_pct", "colour_index",
    ],
    "categorical": [],
    "weights": None,
    "groups": "glasshouse",
    "outcome": "binary",
    "positive_level": "top",
}


def sensor_line(n_rows: int = 100_000, n_cols: int = 100, n_groups: int = 200, n_drivers: int = 8,
                seed: int = 7) -> pd.DataFrame:
    """A processing line: ``n_cols`` sensors driven by ``n_drivers`` hidden drivers.

    Sensors are noisy linear mixtures of the drivers, so they track each other
    strongly; batches (``batch``) shift the drivers.  The output ``throughput``
    depends on a handful of drivers.
    """
    rng = np.random.default_rng(seed)
    batch = rng.integers(0, n_groups, n_rows)
    batch_shift = rng.normal(0, 0.5, (n_groups, n_drivers))
    drivers = rng.normal(0, 1, (n_rows, n_drivers)) + batch_shift[batch]
    loading = rng.normal(0, 1, (n_drivers, n_cols)) * (rng.random((n_drivers, n_cols)) < 0.4)
    loading[rng.integers(0, n_drivers, n_cols), np.arange(n_cols)] += 1.0
    sensors = drivers @ loading + rng.normal(0, 0.3, (n_rows, n_cols))
    sensors = sensors * rng.uniform(0.5, 20, n_cols) + rng.uniform(-50, 50, n_cols)
    beta = np.zeros(n_drivers)
    beta[:3] = (1.5, -0.8, 0.4)
    throughput = 100 + drivers @ beta + rng.normal(0, 1.0, n_rows)
    cols = {f"s{j + 1:03d}": sensors[:, j] for j in range(n_cols)}
    frame = pd.DataFrame(cols)
    frame.insert(0, "batch", np.array([f"B{b:04d}" for b in range(n_groups)])[batch])
    frame["throughput"] = throughput
    return frame
