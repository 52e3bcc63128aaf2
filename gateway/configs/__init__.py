"""Shipped gateway configurations (``leakfleet gateway --config demo``)."""
