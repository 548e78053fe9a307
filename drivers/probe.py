"""Trying each operation of an instrument profile, leaving the instrument as it was.

Queries are sent as they are; a setting is written only when the profile can read it
back, and then with the value read back, which is checked afterwards (and written
again if it changed). Settings that cannot be read back are reported, not tried.
``reset`` is never tried; arming an acquisition only when asked. The probe is given
its link (:class:`~tankside.drivers.scpi.ScpiLink`); it opens nothing.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from enum import StrEnum

from . import ieee488
from .digitiser import decode_codes
from .errors import ConnectionLost, InstrumentError, NoTrigger, ProtocolError
from .profile import Profile
from .scpi import ScpiLink


class Outcome(StrEnum):
    """What trying one operation gave."""

    OK = "ok"
    FAILED = "failed"
    NOT_TRIED = "not tried"


_DIGITISER_SETTINGS = (  # (set key, read-back key, placeholder)
    ("set_record_length", "query_record_length", "points"),
    ("set_sample_rate", "query_sample_rate", "rate_hz"),
    ("set_range", "query_range", "range_v"),
    ("set_offset", "query_offset", "offset_v"),
    ("set_coupling", "query_coupling", "coupling"),
    ("set_impedance", "query_impedance", "impedance_ohm"),
    ("set_trigger_source", "query_trigger_source", "source"),
    ("set_trigger_level", "query_trigger_level", "level_v"),
    ("set_trigger_slope", "query_trigger_slope", "slope"),
    ("set_averages", "query_averages", "count"),
)
_GENERATOR_SETTINGS = (
    ("set_amplitude", "get_amplitude", "amplitude_vpp"),
    ("set_frequency", "get_frequency", "frequency_hz"),
    ("set_burst_cycles", "get_burst_cycles", "cycles"),
    ("set_burst_period", "get_burst_period", "period_s"),
)
_NUMERIC_QUERIES = ("get_time_step", "get_time_origin", "get_volts_per_code", "get_offset",
                    "get_amplitude", "get_frequency", "get_burst_cycles", "get_burst_period")


@dataclass
class Row:
    """One operation tried (or not): its command as sent and what came of it."""

    operation: str
    command: str
    result: str
    detail: str = ""


class Prober:
    """Tries the operations of ``profile`` over ``link``; :attr:`rows` holds the report."""

    def __init__(self, link: ScpiLink, profile: Profile | None,
                 trigger_timeout_s: float = 5.0):
        self.link = link
        self.trigger_timeout_s = trigger_timeout_s
        self.profile = profile
        self.rows: list[Row] = []

    @property
    def _profile(self) -> Profile:
        """The profile; the operations below are tried only when one was given."""
        if self.profile is None:  # pragma: no cover - run() returns first without one
            raise RuntimeError("probe: no profile to try")
        return self.profile

    def _try(self, operation: str, command: str, action) -> str | None:
        """Run ``action()``; record ok with its detail, or failed with the reason."""
        try:
            detail = action()
        except ConnectionLost:
            self.rows.append(Row(operation, command, Outcome.FAILED, "connection lost"))
            raise
        except InstrumentError as err:
            self.rows.append(Row(operation, command, Outcome.FAILED,
                                 err.message + self._queued_errors()))
            return None
        self.rows.append(Row(operation, command, Outcome.OK, "" if detail is None else str(detail)))
        return "" if detail is None else str(detail)

    def _queued_errors(self) -> str:
        """What the instrument queued about a failed operation, so the error is charged
        to it and not to the next one (resynchronising first after a timeout)."""
        try:
            errors = self.link.drain_errors()
        except ConnectionLost:
            raise
        except InstrumentError as err:
            return f"; error queue unreadable: {err.message}"
        return "".join(f"; queued {code}, {text!r}" for code, text in errors)

    def _query(self, command: str) -> str:
        reply = self.link.query(command).strip()
        self.link.check_errors(command)
        return reply

    def common(self) -> None:
        self._try("identify", "*IDN?", self.link.identify)
        self._try("error queue", self.link.error_query,
                  lambda: f"{len(self.link.drain_errors())} queued error(s) read")
        self._try("wait complete", "*OPC?", self.link.opc)

    def setup_lines(self) -> None:
        """Send each ``[commands] setup`` line as a session would, checking the error
        queue after it (the lines are the profile's own settings, so nothing is restored)."""
        for n, line in enumerate(self._profile.setup, start=1):
            def action(line=line):
                self.link.write_step(line)
                return "sent, no error queued"
            self._try(f"setup line {n}", line, action)

    def fixed_rate(self) -> None:
        """Without ``set_sample_rate`` the rate is the instrument's own: report the one
        its time step implies (the rate a session will use and record)."""
        if self._profile.has("set_sample_rate"):
            return
        command = self._profile.command("get_time_step", channel=1)

        def action():
            dt_s = ieee488.parse_number(self._query(command))
            if not dt_s > 0:
                raise ProtocolError(f"time step {dt_s!r} s is not positive")
            return f"fixed by the instrument: {1.0 / dt_s:g} Hz (time step {dt_s:g} s)"
        self._try("sample rate", command, action)

    def _try_wait_complete(self) -> str | None:
        """Without ``acquisition_done``: wait for the armed acquisition on
        ``wait_complete`` (the session does the same), up to the trigger timeout."""
        command = self._profile.command("wait_complete")

        def wait():
            saved = self.link.timeout_s
            self.link.timeout_s = self.trigger_timeout_s
            try:
                reply = self._query(command)
            finally:
                self.link.timeout_s = saved
            if reply != "1":
                raise ProtocolError(f"expected '1', got {reply!r}")
            return reply
        return self._try("wait_complete", command, wait)

    def queries(self, keys, parse=None) -> None:
        for key in keys:
            if not self._profile.has(key):
                continue
            command = self._profile.command(key, channel=1)

            def action(command=command, key=key):
                reply = self._query(command)
                if parse is not None or key in _NUMERIC_QUERIES:
                    (parse or ieee488.parse_number)(reply)
                return reply
            self._try(key, command, action)

    def settings(self, steps) -> None:
        for set_key, read_key, placeholder in steps:
            if not self._profile.has(set_key):
                continue
            template = self._profile.commands[set_key]
            if not self._profile.has(read_key):
                self.rows.append(Row(set_key, template, Outcome.NOT_TRIED,
                                     f"no {read_key} in the profile to restore it"))
                continue
            read_cmd = self._profile.command(read_key, channel=1)
            try:
                before = self._query(read_cmd)
            except ConnectionLost:
                raise
            except InstrumentError as err:
                self.rows.append(Row(set_key, template, Outcome.NOT_TRIED,
                                     f"cannot read it back ({read_key}): {err.message}"))
                continue
            try:
                command = self._profile.command(set_key, channel=1, **{placeholder: before})
            except (ValueError, KeyError) as err:
                self.rows.append(Row(set_key, template, Outcome.NOT_TRIED,
                                     f"read-back {before!r} does not fill the template: {err}"))
                continue

            def action(command=command, read_cmd=read_cmd, before=before):
                self.link.write_step(command)
                after = self._query(read_cmd)
                if after != before:
                    self.link.write_step(command)
                    raise InstrumentError(f"read back {after!r} after writing {before!r}; "
                                          "written again")
                return f"unchanged: {before}"
            self._try(set_key, command, action)

    def output_state(self) -> None:
        values = self._profile.values
        try:
            on = ieee488.parse_bool(self._query(self._profile.command("get_output")),
                                    true_replies=values["output_on_replies"],
                                    false_replies=values["output_off_replies"])
        except ConnectionLost:
            raise
        except InstrumentError as err:
            self.rows.append(Row("set_output", self._profile.commands["set_output"],
                                 Outcome.NOT_TRIED,
                                 f"output state unreadable: {err.message}"))
            return
        command = self._profile.command("set_output",
                                       state=values["output_on" if on else "output_off"])

        def action():
            self.link.write_step(command)
            return f"unchanged: {'on' if on else 'off'}"
        self._try("set_output", command, action)

    def acquisition(self, allowed: bool) -> None:
        keys = ("arm_single", "acquisition_done", "fetch_waveform")
        if not allowed:
            for key in keys:
                if self._profile.has(key):
                    self.rows.append(Row(key, self._profile.commands[key], Outcome.NOT_TRIED,
                                         "use --acquire"))
            return
        arm = self._profile.command("arm_single", channel=1)

        def arm_action():
            self.link.write_step(arm)
        self._try("arm_single", arm, arm_action)
        if self._profile.has("acquisition_done"):
            done = self._profile.command("acquisition_done", channel=1)

            def wait_done():
                deadline = time.monotonic() + self.trigger_timeout_s
                while not ieee488.parse_bool(self._query(done)):
                    if time.monotonic() >= deadline:
                        raise NoTrigger(f"not done within {self.trigger_timeout_s:g} s")
                    time.sleep(0.01)
                return "1"
            if self._try("acquisition_done", done, wait_done) is None:
                return
        elif self._try_wait_complete() is None:
            return
        fetch = self._profile.command("fetch_waveform", channel=1)

        def fetch_action():
            codes = decode_codes(self.link.query_block(fetch), self._profile.dtype)
            return f"{codes.size} samples ({self._profile.data_format})"
        self._try("fetch_waveform", fetch, fetch_action)

    def run(self, acquire: bool) -> None:
        self.common()
        if self.profile is None:
            return
        self.setup_lines()
        if self._profile.kind == "digitiser":
            self.queries(("get_time_step", "get_time_origin", "get_volts_per_code", "get_offset"))
            self.fixed_rate()
            self.settings(_DIGITISER_SETTINGS)
            self.acquisition(acquire)
        else:
            self.queries(("get_output",), parse=lambda r: ieee488.parse_bool(
                r, true_replies=self._profile.values["output_on_replies"],
                false_replies=self._profile.values["output_off_replies"]))
            self.settings(_GENERATOR_SETTINGS)
            self.output_state()
        if self._profile.has("reset"):
            self.rows.append(Row("reset", self._profile.commands["reset"], Outcome.NOT_TRIED,
                                 "would change every setting"))
