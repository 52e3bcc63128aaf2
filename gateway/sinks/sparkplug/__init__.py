"""Sparkplug B over MQTT: the gateway is an edge node, each station a device.

``payload.proto`` is the Sparkplug B payload (the parts leakfleet uses) and ``payload_pb2`` the
module protoc generated from it; ``metrics`` turns records into metrics (pure), ``node`` is the
sink that publishes them behind the journal cursor.
"""
