"""Invented demo scenarios (installed as `sheetnet_demo`)."""

from .scenarios import coffee_lot_grades, cold_chain_shipments, depot_parcel_weeks, lagged

__all__ = ["coffee_lot_grades", "cold_chain_shipments", "depot_parcel_weeks", "lagged"]
