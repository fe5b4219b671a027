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
from typing import Any, Callable

import numpy as np
import pandas as pd

import sheetnet


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


def lagged(series: np.ndarray, lags: int) -> np.ndarray:
    """Columns ``lag 1 .. lag k`` of a series (rows before the k-th are dropped): shape (n - k, k)."""
    series = np.asarray(series, dtype=np.float64)
    return np.column_stack([series[lags - j: len(series) - j] for j in range(1, lags + 1)])


# --- the scenarios as ready-made problems for the demo ------------------------------------

@dataclass(frozen=True)
class Problem:
    """One demo task: inputs, target, the holdout rows and how to score a model on them."""

    slug: str  # short name for files
    title: str
    inputs: Any
    target: np.ndarray
    holdout: np.ndarray  # True for held-out rows
    hidden: tuple[int, ...]
    note: str = ""
    # turns a model's holdout predictions into the metrics to report; None: sheetnet.score
    report: Callable[[Any], dict[str, Any]] | None = None
    # (actual, predicted) on the holdout rows for regression pictures; None: target and model.predict
    compare: Callable[[Any], tuple[np.ndarray, np.ndarray]] | None = None

    def training_rows(self) -> tuple[Any, np.ndarray]:
        return sheetnet.take_rows(self.inputs, ~self.holdout), self.target[~self.holdout]

    def holdout_rows(self) -> tuple[Any, np.ndarray]:
        return sheetnet.take_rows(self.inputs, self.holdout), self.target[self.holdout]

    def actual_and_predicted(self, model: Any) -> tuple[np.ndarray, np.ndarray]:
        if self.compare is not None:
            return self.compare(model)
        inputs, actual = self.holdout_rows()
        return actual, model.predict(inputs)

    def score(self, model: Any) -> dict[str, Any]:
        if self.report is not None:
            return self.report(model)
        return sheetnet.score(model, *self.holdout_rows())


def shipments_problem(seed: int = 0) -> Problem:
    table = cold_chain_shipments(seed=seed + 7)
    spoiled = table["spoiled"].to_numpy()
    return Problem(
        "shipments",
        f"Cold-chain shipments: spoiled yes/no, {len(table)} rows",
        table.drop(columns=["shipment", "spoiled"]),
        spoiled,
        sheetnet.holdout_mask(len(table), 0.25, seed, "stratified", spoiled),
        (6,),
    )


def parcels_problem(seed: int = 0, lags: int = 4) -> Problem:
    """Next week's parcels from the last weekly changes and the season, the last fifth held out.

    The network predicts the change from this week to the next (which lets it
    follow the trend beyond the training range); the report scores the
    resulting level forecast against the naive 'same as this week' forecast.
    """
    weeks = depot_parcel_weeks(seed=seed + 11)
    level = weeks["parcels"].to_numpy(dtype=np.float64)
    change = np.diff(level)  # change[t] = level[t + 1] - level[t]
    week = weeks["week_of_year"].to_numpy()[lags + 1:]
    angle = 2 * np.pi * week / 52
    inputs = np.column_stack([lagged(change, lags), np.sin(angle), np.cos(angle)])
    target = change[lags:]
    this_week, next_week = level[lags:-1], level[lags + 1:]
    held = sheetnet.holdout_mask(len(target), 0.2, mode="ordered")

    def compare(model: Any) -> tuple[np.ndarray, np.ndarray]:
        return next_week[held], this_week[held] + model.predict(inputs[held])

    def report(model: Any) -> dict[str, Any]:
        found: dict[str, Any] = sheetnet.metrics.regression_metrics(*compare(model))
        found["naive_rmse"] = sheetnet.metrics.rmse(next_week[held], this_week[held])
        return found

    return Problem(
        "parcels",
        f"Depot parcels per week: next week from the last {lags} weekly changes and the season, {len(target)} weeks",
        inputs,
        target,
        held,
        (4,),
        note="naive_rmse: the forecast 'next week as this week', for comparison",
        report=report,
        compare=compare,
    )


def coffee_problem(seed: int = 0) -> Problem:
    table = coffee_lot_grades(seed=seed + 5)
    grade = table["grade"].to_numpy()
    return Problem(
        "coffee",
        f"Coffee lots: grade A, B or C, {len(table)} rows",
        table.drop(columns=["lot", "grade"]),
        grade,
        sheetnet.holdout_mask(len(table), 0.25, seed, "stratified", grade),
        (6,),
    )


def problems(seed: int = 0) -> list[Problem]:
    """The three demo problems, in the order the demo shows them."""
    return [shipments_problem(seed), parcels_problem(seed), coffee_problem(seed)]
