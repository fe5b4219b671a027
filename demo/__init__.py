"""Invented demo scenarios (installed as `sheetnet_demo`)."""

from .scenarios import Scenario, coffee_lot_grades, cold_chain_shipments, depot_parcel_weeks, parcel_table, scenarios

__all__ = ["Scenario", "coffee_lot_grades", "cold_chain_shipments", "depot_parcel_weeks", "parcel_table", "scenarios"]
