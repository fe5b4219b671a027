"""Seeded generators of sheetnet's invented demo scenarios.

Every table here is made up: the columns, the rules that link them and the
noise are ours, chosen so that a small network has something real to find
(interactions and curvature a straight line misses). Same seed, same table.

- `cold_chain_shipments`: did a refrigerated shipment arrive spoiled (yes/no)?
- `depot_parcel_weeks`: parcels handled per week at a regional depot (a time series).
- `coffee_lot_grades`: which grade (A, B or C) a green-coffee lot earns.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd


def cold_chain_shipments(rows: int = 600, seed: int = 7) -> pd.DataFrame:
    """Refrigerated shipments and whether each arrived spoiled.

    Spoilage risk climbs with heat exposure (hours above the set point times
    degrees over it), door openings, and falls with better packaging; long
    routes matter mainly when the packaging is plain foam.
    """
    rng = np.random.default_rng(seed)
    transit_hours = rng.gamma(4.0, 9.0, rows).round(1)
    peak_temp_c = (4.0 + rng.gamma(2.0, 1.6, rows)).round(1)
    door_openings = rng.poisson(3.0, rows)
    packaging = rng.choice(["foam", "gel pack", "dry ice"], rows, p=[0.45, 0.35, 0.20])
    route_km = rng.uniform(40, 900, rows).round(0)
    heat = np.maximum(peak_temp_c - 5.0, 0.0) * np.log1p(transit_hours)
    protection = np.select([packaging == "dry ice", packaging == "gel pack"], [1.6, 0.8], 0.0)
    score = (
        0.55 * heat
        + 0.25 * door_openings
        - protection * (1.0 + 0.08 * heat)
        + np.where(packaging == "foam", 0.0016 * route_km, 0.0)
        - 3.4
    )
    spoiled = rng.random(rows) < 1.0 / (1.0 + np.exp(-score))
    return pd.DataFrame(
        {
            "shipment": [f"S{10000 + i}" for i in range(rows)],
            "transit_hours": transit_hours,
            "peak_temp_c": peak_temp_c,
            "door_openings": door_openings,
            "packaging": packaging,
            "route_km": route_km,
            "spoiled": np.where(spoiled, "yes", "no"),
        }
    )


def depot_parcel_weeks(weeks: int = 260, seed: int = 11) -> pd.DataFrame:
    """Weekly parcels handled at a depot: trend, a yearly cycle, a peak season and noise."""
    rng = np.random.default_rng(seed)
    t = np.arange(weeks)
    week_of_year = t % 52
    trend = 5200 + 9.0 * t
    yearly = 650 * np.sin(2 * np.pi * (week_of_year - 10) / 52)
    peak = 1800 * np.exp(-0.5 * ((week_of_year - 48) / 2.2) ** 2)  # the run-up to the winter holidays
    level = trend + yearly + peak
    noise = np.zeros(weeks)
    for i in range(1, weeks):  # persistent shocks: a busy week tends to be followed by another
        noise[i] = 0.6 * noise[i - 1] + rng.normal(0, 160)
    parcels = np.round(level + noise).astype(int)
    start = pd.Timestamp("2021-01-04")
    return pd.DataFrame(
        {
            "week_starting": [start + pd.Timedelta(weeks=int(i)) for i in t],
            "week_of_year": week_of_year + 1,
            "parcels": parcels,
        }
    )


def coffee_lot_grades(rows: int = 450, seed: int = 5) -> pd.DataFrame:
    """Green-coffee lots with lab readings and the grade each earned (A, B or C)."""
    rng = np.random.default_rng(seed)
    moisture_pct = rng.normal(11.0, 1.1, rows).round(2)
    density_g_l = rng.normal(700, 35, rows).round(0)
    defects_per_300g = rng.poisson(6.0, rows)
    altitude_m = rng.uniform(800, 2200, rows).round(0)
    process = rng.choice(["washed", "natural", "honey"], rows, p=[0.5, 0.3, 0.2])
    quality = (
        0.004 * (altitude_m - 1500)
        + 0.03 * (density_g_l - 700)
        - 0.35 * defects_per_300g
        - 0.9 * (moisture_pct - 10.8) ** 2
        + np.select([process == "washed", process == "honey"], [0.5, 0.2], -0.1)
        + rng.normal(0, 0.6, rows)
    )
    grade = np.where(quality > -0.6, "A", np.where(quality > -2.6, "B", "C"))
    return pd.DataFrame(
        {
            "lot": [f"L{3000 + i}" for i in range(rows)],
            "moisture_pct": moisture_pct,
            "density_g_l": density_g_l,
            "defects_per_300g": defects_per_300g,
            "altitude_m": altitude_m,
            "process": process,
            "grade": grade,
        }
    )


# --- the scenarios as the demo workbook lays them out ---------------------------------------

@dataclass(frozen=True)
class Scenario:
    """One demo task: its table, what to predict, and how to split and train."""

    sheet: str
    model_name: str
    title: str
    table: pd.DataFrame
    target: str
    hidden: str
    settings: str  # as typed in SHEETNET.TRAIN's settings argument
    split_mode: str  # as typed in SHEETNET.SPLIT's mode argument
    holdout_share: float
    level_column: str | None = None  # the target is a change: forecasts are this column plus the prediction


def parcel_table(weeks: pd.DataFrame, lags: int = 4) -> pd.DataFrame:
    """The weekly series as a table: next week's change from the last weekly changes and the season.

    Forecasting the change rather than the level lets the network follow the
    trend beyond the range of the training weeks.
    """
    level = weeks["parcels"].to_numpy(dtype=np.float64)
    change = np.append(np.diff(level), np.nan)  # change into next week; unknown for the last week
    past = np.concatenate([[np.nan], change[:-1]])  # this week's change, from last week
    angle = 2 * np.pi * (weeks["week_of_year"].to_numpy() % 52 + 1) / 52  # the season of next week
    table = pd.DataFrame({"week starting": weeks["week_starting"].dt.strftime("%Y-%m-%d"), "parcels this week": level})
    for k in range(1, lags + 1):
        table[f"change lag {k}"] = np.concatenate([[np.nan] * (k - 1), past[: len(past) - k + 1]])
    table["season sin"] = np.sin(angle)
    table["season cos"] = np.cos(angle)
    table["next change"] = change
    return table.iloc[lags:-1].reset_index(drop=True)  # rows with a full history and a known next week


def scenarios(seed: int = 0) -> list[Scenario]:
    """The three demo scenarios, in the order the demo shows them."""
    return [
        Scenario("Shipments", "shipments_model", "Did a refrigerated shipment arrive spoiled?", cold_chain_shipments(seed=seed + 7),
                 "spoiled", "6", f"ignore=shipment; seed={seed}", "stratified spoiled", 0.25),
        Scenario("Parcels", "parcels_model", "Next week's parcels at the depot (a forecast of the weekly change)",
                 parcel_table(depot_parcel_weeks(seed=seed + 11)), "next change", "4",
                 f"ignore=week starting, parcels this week; seed={seed}", "ordered", 0.2, level_column="parcels this week"),
        Scenario("Coffee", "coffee_model", "Which grade does a green-coffee lot earn?", coffee_lot_grades(seed=seed + 5),
                 "grade", "6", f"ignore=lot; seed={seed}", "stratified grade", 0.25),
    ]
