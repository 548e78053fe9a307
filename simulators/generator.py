"""The simulated signal generator (pure device model) driving the shared scene.

Identity ``TANKSIDE,SIMGEN-1,0001,1.0``. It always runs in triggered-burst mode: one
burst of ``BURSt:NCYCles`` cycles every ``BURSt:PERiod`` seconds, with a sync pulse to the
digitiser's EXT input at each burst. The power-on (and ``*RST``) state has the output ON,
so a bench without a generator section still sees the pulse. Commands:

=======================================  ===============================================
``OUTPut[:STATe] ON|OFF|1|0`` / ``?``     output on or off (``?`` replies 1 or 0)
``[SOURce]:VOLTage[:AMPLitude] <vpp>``    amplitude 0.01 .. 10 V peak to peak, ``?``
``[SOURce]:FREQuency[:CW] <hz>`` / ``?``  1 kHz .. 25 MHz
``BURSt:NCYCles <n>`` / ``?``             1 .. 10000 cycles
``BURSt:PERiod <s>`` / ``?``              1e-4 .. 100 s; also the trigger period
=======================================  ===============================================

Out-of-range values give -222 (data out of range) and change nothing; a burst longer
than its period gives -221 (settings conflict).
"""

from __future__ import annotations

from .scene import Drive, Scene
from .scpi import (
    ScpiDevice,
    ScpiError,
    expect_args,
    parse_bool,
    parse_bounded,
    parse_integer,
)

AMPLITUDE_VPP = (0.01, 10.0)
FREQUENCY_HZ = (1.0e3, 25.0e6)
CYCLES = (1, 10000)
PERIOD_S = (1.0e-4, 100.0)


class SimulatedGenerator(ScpiDevice):
    """Pure model of the simulated signal generator; every change goes to ``scene``."""

    IDENTITY = "TANKSIDE,SIMGEN-1,0001,1.0"

    def __init__(self, scene: Scene, *, power_on: Drive | None = None):
        super().__init__()
        self.scene = scene
        self.power_on = power_on or scene.drive
        a = self.add
        a("OUTPut[:STATe]", write=self._set_output,
          query=lambda x, s: self._q(x, int(self.drive.output_on)))
        a("[SOURce]:VOLTage[:AMPLitude]", write=self._set_amplitude,
          query=lambda x, s: self._qf(x, self.drive.amplitude_vpp))
        a("[SOURce]:FREQuency[:CW]", write=self._set_frequency,
          query=lambda x, s: self._qf(x, self.drive.frequency_hz))
        a("BURSt:NCYCles", write=self._set_cycles,
          query=lambda x, s: self._q(x, self.drive.burst_cycles))
        a("BURSt:PERiod", write=self._set_period,
          query=lambda x, s: self._qf(x, self.drive.burst_period_s))

    @property
    def drive(self) -> Drive:
        return self.scene.drive

    def identity(self) -> str:
        return self.IDENTITY

    def reset(self) -> None:
        p = self.power_on
        self.scene.set_drive(output_on=p.output_on, amplitude_vpp=p.amplitude_vpp,
                             frequency_hz=p.frequency_hz, burst_cycles=p.burst_cycles,
                             burst_period_s=p.burst_period_s)

    def _check_fits(self, cycles: int, frequency_hz: float, period_s: float) -> None:
        if cycles / frequency_hz >= period_s:
            raise ScpiError(-221, f"burst of {cycles} cycles at {frequency_hz:g} Hz "
                                  f"does not fit in {period_s:g} s")

    def _set_output(self, args, s):
        expect_args(args, 1)
        self.scene.set_drive(output_on=parse_bool(args[0]))

    def _set_amplitude(self, args, s):
        expect_args(args, 1)
        self.scene.set_drive(amplitude_vpp=parse_bounded(args[0], *AMPLITUDE_VPP, what="amplitude"))

    def _set_frequency(self, args, s):
        expect_args(args, 1)
        f = parse_bounded(args[0], *FREQUENCY_HZ, what="frequency")
        self._check_fits(self.drive.burst_cycles, f, self.drive.burst_period_s)
        self.scene.set_drive(frequency_hz=f)

    def _set_cycles(self, args, s):
        expect_args(args, 1)
        n = parse_integer(args[0], *CYCLES, what="burst cycles")
        self._check_fits(n, self.drive.frequency_hz, self.drive.burst_period_s)
        self.scene.set_drive(burst_cycles=n)

    def _set_period(self, args, s):
        expect_args(args, 1)
        period = parse_bounded(args[0], *PERIOD_S, what="burst period")
        self._check_fits(self.drive.burst_cycles, self.drive.frequency_hz, period)
        self.scene.set_drive(burst_period_s=period)
