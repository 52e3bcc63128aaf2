"""The integrator's workbench: pure helpers behind ``leakfleet probe`` and ``leakfleet capture``.

Finding out what an undocumented station sends is a matter of looking at its data from every
angle: a register as int16, uint16, hex and bits; each aligned pair as int32, uint32 and float32
in the four word and byte orders; what changes between two cycles (the counter, the result
block); which baud rate and parity turn a serial capture into readable text. Everything here is
pure (registers and bytes in, tables out); the commands in ``gateway/cli`` do the reading, always
read-only.
"""
