"""InfluxDB protocol pieces shared by the write side (``gateway.sinks.influx``) and the read side
(``gateway.store.influx``): URLs and the HTTP API (``http``), and the line-protocol encoding of
our records (``lineprotocol``). Neither side depends on the other; both depend on this package.
"""
