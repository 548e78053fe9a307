"""tankside.simulators: simulated instruments on real transports, and the scene they measure.

Imports neither tankside.monitor nor tankside.drivers, so that a bug in the monitor
cannot cancel out against the same bug in its stand-in instrument.
"""
