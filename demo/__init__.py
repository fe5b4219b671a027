"""Invented demo scenarios (installed as `sheetnet_demo`)."""

from .scenarios import Problem, coffee_lot_grades, cold_chain_shipments, depot_parcel_weeks, lagged, problems

__all__ = ["Problem", "coffee_lot_grades", "cold_chain_shipments", "depot_parcel_weeks", "lagged", "problems"]
