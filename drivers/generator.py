"""Profile-driven signal generator driver: output, amplitude, frequency, burst."""

from __future__ import annotations

import math

from . import ieee488
from .errors import ProtocolError, SettingError
from .profile import Profile
from .scpi import ScpiLink


def _positive(name: str, value) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) or not (
            math.isfinite(value) and value > 0):
        raise SettingError(f"{name} must be a positive number, got {value!r}")
    return value


class Generator:
    """A signal generator driven by its profile.

    Parameters
    ----------
    link : ScpiLink
    profile : Profile
        A ``kind = "generator"`` profile.

    Every setter is a configuration step: the error queue is drained after it and the
    link's error policy applied.
    """

    def __init__(self, link: ScpiLink, profile: Profile):
        if profile.kind != "generator":
            raise SettingError(f"{profile.source}: profile is for a {profile.kind}, "
                               "not a generator")
        self.link = link
        self.profile = profile
        if profile.has("get_error"):
            link.error_query = profile.command("get_error")

    @property
    def identity(self) -> str:
        """The ``identify`` reply (queried once)."""
        if self.link.identity is None:
            self.link.identity = self.link.query(self.profile.command("identify")).strip()
        return self.link.identity

    def _number(self, key: str) -> float:
        reply = self.link.query(self.profile.command(key))
        try:
            return ieee488.parse_number(reply)
        except ProtocolError as err:
            raise ProtocolError(f"{key}: {err.message}", resource=self.link.name) from err

    def send_setup(self) -> None:
        """Send the profile's ``[commands] setup`` lines in order, checking errors after
        each (the opener calls this after every connection)."""
        for line in self.profile.setup:
            self.link.write_step(line)

    def reset(self) -> None:
        """Send the profile's ``reset`` command."""
        self.link.write_step(self.profile.command("reset"))

    def set_output(self, on: bool) -> None:
        """Switch the output on or off."""
        word = self.profile.values["output_on" if on else "output_off"]
        self.link.write_step(self.profile.command("set_output", state=word))

    def output_is_on(self) -> bool:
        """Query the output state."""
        reply = self.link.query(self.profile.command("get_output"))
        try:
            return ieee488.parse_bool(reply, true_replies=self.profile.values["output_on_replies"],
                                      false_replies=self.profile.values["output_off_replies"])
        except ProtocolError as err:
            raise ProtocolError(f"get_output: {err.message}", resource=self.link.name) from err

    def set_amplitude(self, vpp: float) -> None:
        """Set the output amplitude, peak to peak, V."""
        self.link.write_step(self.profile.command("set_amplitude",
                                                     amplitude_vpp=_positive("amplitude", vpp)))

    def amplitude(self) -> float:
        """The output amplitude, peak to peak, V."""
        return self._number("get_amplitude")

    def set_frequency(self, hz: float) -> None:
        """Set the carrier frequency, Hz."""
        self.link.write_step(self.profile.command("set_frequency",
                                                     frequency_hz=_positive("frequency", hz)))

    def frequency(self) -> float:
        """The carrier frequency, Hz (needs ``get_frequency`` in the profile)."""
        return self._number("get_frequency")

    def set_burst(self, cycles: int, period_s: float) -> None:
        """Set the burst length in cycles and the burst repetition period, s."""
        if isinstance(cycles, bool) or not isinstance(cycles, int) or cycles < 1:
            raise SettingError(f"burst cycles must be an integer >= 1, got {cycles!r}")
        period_s = _positive("burst period", period_s)
        self.link.write_step(self.profile.command("set_burst_cycles", cycles=cycles))
        self.link.write_step(self.profile.command("set_burst_period", period_s=period_s))

    def burst(self) -> tuple[int, float]:
        """(cycles, period_s) (needs ``get_burst_cycles`` and ``get_burst_period``)."""
        cycles = self._number("get_burst_cycles")
        if cycles != int(cycles):
            raise ProtocolError(f"get_burst_cycles: expected an integer, got {cycles!r}",
                                resource=self.link.name)
        return int(cycles), self._number("get_burst_period")
