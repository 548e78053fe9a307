"""tankside.drivers: instrument I/O only (SCPI over pyvisa, serial over pyserial); no physics."""
