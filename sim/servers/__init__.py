"""Protocol servers: the edge where a station's records meet real sockets and pseudo-terminals.

Every server takes the same calls from the station runner (``publish`` a record with its fault
flags, ``set_state``, ``set_link``) and hides how its transport carries them: a TCP port that
streams lines, a pseudo-terminal answering queries, a pymodbus Modbus TCP server, or a pymodbus
RTU server behind a relay between two pseudo-terminals. Faults that belong to a transport (a
dropped link, a slow or exceptional answer, a torn register block) are done here; which records
carry a fault was decided by the pure station model.
"""

from __future__ import annotations

from sim.servers.base import Endpoint, StationServer, TruthSink
from sim.servers.delim import DelimServer
from sim.servers.kv import KvServer
from sim.servers.modbus import ModbusRtuServer, ModbusTcpStationServer

__all__ = [
    "DelimServer",
    "Endpoint",
    "KvServer",
    "ModbusRtuServer",
    "ModbusTcpStationServer",
    "StationServer",
    "TruthSink",
]
