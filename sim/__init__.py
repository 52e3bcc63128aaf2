"""A plant of simulated pressure-decay leak-test stations speaking serial and Modbus.

Physics and station behaviour are pure (``sim.physics``, ``sim.station``), the wire formats are
pure encoders (``sim.formats``), and ``sim.run.Plant`` puts them on real sockets and
pseudo-terminals. ``leakfleet sim`` is the command line over ``Plant``.
"""

from __future__ import annotations

__all__ = ["Plant", "load_scenario"]


def __getattr__(name: str) -> object:
    # lazy: importing sim must not pull in pymodbus for the pure parts
    if name == "Plant":
        from sim.run import Plant

        return Plant
    if name == "load_scenario":
        from sim.scenario import load_scenario

        return load_scenario
    raise AttributeError(name)
