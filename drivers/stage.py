"""A positioning stage (motion controller) described by a TOML profile.

The profile (``[instrument] kind = "stage"``; the template is
``drivers/profiles/generic-line-stage.toml``) names the axes with their command word
and scale (counts per mm), gives a command template for each operation and a regular
expression with named groups for each reply. tankside reasons in mm; the driver turns
mm into the controller's counts and back, and never guesses a reply by position.

Soft limits are the bench's, not the controller's: :class:`Stage` refuses a target
outside them with :class:`~tankside.drivers.errors.LimitError` before anything is sent.

    stage = open_stage(load_stage_profile("my-stage.toml"), port="/dev/ttyUSB0",
                       limits={"x": (-20, 20), "z": (0, 80)})
    stage.move_to({"x": 1.5})
    stage.wait_until_still(10.0)     # {'x': 1.5, 'y': ..., 'z': ...}
"""

from __future__ import annotations

import math
import re
import time
from dataclasses import dataclass
from pathlib import Path

from .errors import (
    InstrumentReportedError,
    InstrumentTimeout,
    LimitError,
    ProtocolError,
    SettingError,
)
from .line import LineSession
from .line_profile import (
    LineTransportSettings,
    open_line_session,
    parse_profile_toml,
    parse_transport,
    pattern,
    read_profile_toml,
    table,
)
from .profile import check_keys, check_template, command_text_problem, fail, number

__all__ = ["StageProfile", "StageAxis", "Stage", "load_stage_profile", "parse_stage_profile",
           "open_stage"]

# command key -> placeholders it may use; a key marked required must be present
_COMMANDS = {
    "identify": (), "move_absolute": ("axis", "counts"), "move_relative": ("axis", "counts"),
    "query_position": ("axis",), "query_moving": ("axis",), "home": ("axis",),
    "stop": ("axis",), "set_velocity": ("axis", "counts_per_s"), "error_query": (),
}
_REQUIRED = ("query_position", "query_moving")
# A profile without move_absolute is *passive*: another program moves the stage and
# tankside only reads where it is (a scan then maps what it sees). One that moves must
# also say how to stop.
_REQUIRED_TO_MOVE = ("move_absolute", "stop")
# reply key -> named groups its pattern must have
_REPLIES = {"acknowledge": (), "position": ("counts",), "moving": ("moving",),
            "error": ("code", "message"), "no_error": (), "identity": ()}
_AXIS_NAME = re.compile(r"^[a-z][a-z0-9_]{0,15}$")


@dataclass(frozen=True)
class StageAxis:
    """One axis: tankside's name for it, its word in commands, counts per mm."""

    name: str
    address: str
    counts_per_mm: float


@dataclass(frozen=True)
class StageProfile:
    """A validated stage profile."""

    source: str
    description: str
    transport: LineTransportSettings
    axes: tuple[StageAxis, ...]
    commands: dict[str, str]
    replies: dict[str, re.Pattern]
    moving_when: str
    settle_s: float = 0.0

    @property
    def passive(self) -> bool:
        """No move command: tankside reads the position and never moves or stops it."""
        return "move_absolute" not in self.commands

    def axis(self, name: str) -> StageAxis:
        for a in self.axes:
            if a.name == name:
                return a
        raise SettingError(f"{self.source}: no axis {name!r} (axes: "
                           f"{', '.join(a.name for a in self.axes)})")


def _template(source: str, key: str, value, allowed: tuple) -> str:
    check_template(source, key, value, allowed)
    return value


def parse_stage_profile(text: str, source: str = "<text>") -> StageProfile:
    """Validate stage profile TOML ``text``; ``source`` names it in error messages."""
    return _from_doc(parse_profile_toml(text, source, "stage"), source)


def load_stage_profile(path: str | Path) -> StageProfile:
    """Load and validate a stage profile file."""
    doc, source = read_profile_toml(path, "stage")
    return _from_doc(doc, source)


def _from_doc(doc: dict, source: str) -> StageProfile:
    check_keys(source, "", doc, ("instrument", "transport", "axes", "commands", "replies",
                                 "motion"))
    transport = parse_transport(source, doc)
    axes_doc = table(source, doc, "axes")
    if not axes_doc:
        raise fail(source, "[axes]", "no axis; give at least one [axes.NAME] table")
    axes = []
    for name, spec in axes_doc.items():
        where = f"[axes.{name}]"
        if not _AXIS_NAME.match(name):
            raise fail(source, where, "axis names are lower-case words (x, y, z, theta)")
        if not isinstance(spec, dict):
            raise fail(source, where, "expected a table")
        check_keys(source, f"axes.{name}", spec, ("address", "counts_per_mm"))
        address = spec.get("address", name)
        if not isinstance(address, str) or not address or command_text_problem(address):
            raise fail(source, f"{where} address", f"expected a command word, got {address!r}")
        cpm = number(source, f"{where} counts_per_mm", spec.get("counts_per_mm"))
        if cpm == 0:
            raise fail(source, f"{where} counts_per_mm", "must not be 0")
        axes.append(StageAxis(name, address, cpm))
    commands_doc = table(source, doc, "commands")
    check_keys(source, "commands", commands_doc, _COMMANDS)
    for key in _REQUIRED:
        if key not in commands_doc:
            raise fail(source, f"[commands] {key}", "required")
    if "move_absolute" in commands_doc or "move_relative" in commands_doc:
        for key in _REQUIRED_TO_MOVE:
            if key not in commands_doc:
                raise fail(source, f"[commands] {key}", "required with a move command (a "
                           "profile without move_absolute and move_relative only reads "
                           "the position: a passive stage)")
    commands = {k: _template(source, k, v, _COMMANDS[k]) for k, v in commands_doc.items()}
    replies_doc = table(source, doc, "replies")
    check_keys(source, "replies", replies_doc, (*_REPLIES, "moving_when"))
    replies = {k: pattern(source, f"[replies] {k}", v, _REPLIES[k])
               for k, v in replies_doc.items() if k != "moving_when"}
    for key in ("position", "moving"):
        if key not in replies:
            raise fail(source, f"[replies] {key}", "required")
    if "error_query" in commands and "no_error" not in replies:
        raise fail(source, "[replies] no_error", "required with [commands] error_query")
    moving_when = replies_doc.get("moving_when", "1")
    if not isinstance(moving_when, str) or not moving_when:
        raise fail(source, "[replies] moving_when", f"expected a string, got {moving_when!r}")
    motion = table(source, doc, "motion", required=False)
    check_keys(source, "motion", motion, ("settle_s",))
    settle = number(source, "[motion] settle_s", motion.get("settle_s", 0.0))
    if settle < 0:
        raise fail(source, "[motion] settle_s", f"must not be negative, got {settle:g}")
    description = doc["instrument"].get("description", "")
    return StageProfile(source=source, description=str(description), transport=transport,
                        axes=tuple(axes), commands=commands, replies=replies,
                        moving_when=moving_when, settle_s=settle)


class Stage:
    """A motion controller driven through its profile.

    Parameters
    ----------
    session : LineSession
    profile : StageProfile
    limits : dict, optional
        Soft limits in mm, ``{axis: (low, high)}``; a move outside them is refused
        before anything is sent. Axes not named are not limited.
    """

    def __init__(self, session: LineSession, profile: StageProfile, *,
                 limits: dict[str, tuple[float, float]] | None = None):
        self.session = session
        self.profile = profile
        self.resource = session.resource
        self.axes = tuple(a.name for a in profile.axes)
        self.limits: dict[str, tuple[float, float]] = {}
        for name, bounds in (limits or {}).items():
            profile.axis(name)
            low, high = (float(b) for b in bounds)
            if not (math.isfinite(low) and math.isfinite(high) and low < high):
                raise SettingError(f"soft limits of axis {name}: expected low < high, "
                                   f"got {bounds!r}")
            self.limits[name] = (low, high)

    # ------------------------------------------------------------ commands
    def _fill(self, key: str, **values) -> str:
        template = self.profile.commands.get(key)
        if template is None:
            raise SettingError(f"{self.profile.source}: the profile has no [commands] {key}")
        return template.format(**values)

    def _reported(self, reply: str, command: str) -> InstrumentReportedError | None:
        error = self.profile.replies.get("error")
        match = error.match(reply) if error is not None else None
        if match is None:
            return None
        try:
            code = int(match.group("code"))
        except ValueError:
            code = 0
        return InstrumentReportedError(code, match.group("message").strip(), command=command,
                                       resource=self.resource)

    def _check_errors(self, command: str) -> None:
        query = self.profile.commands.get("error_query")
        if query is None:
            return
        reply = self.session.query(query)
        if self.profile.replies["no_error"].match(reply):
            return
        raise self._reported(reply, command) or ProtocolError(
            f"error query {query!r} after {command!r}: reply {reply!r} matches neither "
            "[replies] no_error nor error", resource=self.resource)

    def _command(self, line: str) -> None:
        ack = self.profile.replies.get("acknowledge")
        if ack is None:
            self.session.write(line)
        else:
            reply = self.session.query(line)
            if not ack.match(reply):
                raise self._reported(reply, line) or ProtocolError(
                    f"reply {reply!r} to {line!r} does not match [replies] acknowledge",
                    resource=self.resource)
        self._check_errors(line)

    def _query(self, line: str, reply_key: str) -> re.Match:
        reply = self.session.query(line)
        match = self.profile.replies[reply_key].match(reply)
        if match is None:
            raise self._reported(reply, line) or ProtocolError(
                f"reply {reply!r} to {line!r} does not match [replies] {reply_key}",
                resource=self.resource)
        return match

    def _each_axis(self, key: str, **values) -> None:
        """Send ``key`` once per axis if its template names {axis}, else once."""
        if "{axis}" in self.profile.commands[key]:
            for a in self.profile.axes:
                self._command(self._fill(key, axis=a.address, **values))
        else:
            self._command(self._fill(key, **values))

    # ------------------------------------------------------------ operations
    def identify(self) -> str:
        if "identify" not in self.profile.commands:
            return ""
        reply = self.session.query(self._fill("identify"))
        identity = self.profile.replies.get("identity")
        if identity is not None and not identity.match(reply):
            raise self._reported(reply, "identify") or ProtocolError(
                f"identity reply {reply!r} does not match [replies] identity",
                resource=self.resource)
        return reply

    def position(self) -> dict[str, float]:
        """Every axis' position, mm."""
        out = {}
        for a in self.profile.axes:
            match = self._query(self._fill("query_position", axis=a.address), "position")
            try:
                counts = float(match.group("counts"))
            except ValueError as err:
                raise ProtocolError(f"position of axis {a.name}: {match.group('counts')!r} "
                                    "is not a number", resource=self.resource) from err
            if not math.isfinite(counts):
                raise ProtocolError(f"position of axis {a.name}: {counts!r}",
                                    resource=self.resource)
            out[a.name] = counts / a.counts_per_mm
        return out

    def _check_target(self, target: dict[str, float]) -> dict[str, float]:
        checked = {}
        for name, value in target.items():
            self.profile.axis(name)
            mm = float(value)
            if not math.isfinite(mm):
                raise LimitError(f"axis {name}: target {value!r} mm is not a finite number; "
                                 "nothing sent", resource=self.resource)
            low, high = self.limits.get(name, (-math.inf, math.inf))
            if not low <= mm <= high:
                raise LimitError(f"axis {name}: target {mm:g} mm is outside the soft limits "
                                 f"{low:g} to {high:g} mm; nothing sent",
                                 resource=self.resource)
            checked[name] = mm
        return checked

    def move_to(self, target: dict[str, float]) -> None:
        """Start an absolute move (mm) of the axes given; returns once it is sent. Every
        target is checked against the soft limits before the first command."""
        checked = self._check_target(target)
        self._refuse_if_passive("move")
        for name, mm in checked.items():
            a = self.profile.axis(name)
            self._command(self._fill("move_absolute", axis=a.address,
                                     counts=round(mm * a.counts_per_mm)))

    @property
    def passive(self) -> bool:
        """Its profile has no move command (see :attr:`StageProfile.passive`)."""
        return self.profile.passive

    def move_by(self, delta: dict[str, float]) -> None:
        """Start a relative move (mm); the end point is checked against the soft limits
        (which needs the present position)."""
        self._refuse_if_passive("move")
        here = self.position()
        target = {name: here[name] + float(d) for name, d in delta.items() if name in here}
        for name in delta:
            self.profile.axis(name)
        checked = self._check_target(target)
        if "move_relative" not in self.profile.commands:
            self.move_to(checked)
            return
        for name, d in delta.items():
            a = self.profile.axis(name)
            self._command(self._fill("move_relative", axis=a.address,
                                     counts=round(float(d) * a.counts_per_mm)))

    def is_moving(self) -> bool:
        for a in self.profile.axes:
            match = self._query(self._fill("query_moving", axis=a.address), "moving")
            if match.group("moving") == self.profile.moving_when:
                return True
        return False

    def wait_until_still(self, timeout_s: float, *, poll_s: float = 0.02) -> dict[str, float]:
        """Wait for every axis to stop (and the profile's settle time); the position then.
        InstrumentTimeout if still moving after ``timeout_s``."""
        deadline = time.monotonic() + timeout_s
        while self.is_moving():
            if time.monotonic() > deadline:
                raise InstrumentTimeout(f"stage still moving after {timeout_s:g} s",
                                        resource=self.resource)
            time.sleep(poll_s)
        if self.profile.settle_s:
            time.sleep(self.profile.settle_s)
        return self.position()

    def home(self) -> None:
        self._each_axis("home")

    def stop(self) -> None:
        """Stop every axis at once (a stopped stage accepts it as well). A passive stage
        has no stop command: nothing is sent (the program that moves it stops it)."""
        if "stop" in self.profile.commands:
            self._each_axis("stop")

    def _refuse_if_passive(self, what: str) -> None:
        if self.profile.passive:
            raise SettingError(f"{self.profile.source}: a passive stage profile (no "
                               f"move_absolute): tankside does not {what} this stage",
                               resource=self.resource)

    def set_velocity(self, mm_per_s: float) -> None:
        if not (math.isfinite(mm_per_s) and mm_per_s > 0):
            raise SettingError(f"velocity must be positive, got {mm_per_s!r} mm/s")
        for a in self.profile.axes:
            self._command(self._fill("set_velocity", axis=a.address,
                                     counts_per_s=round(mm_per_s * abs(a.counts_per_mm))))

    def close(self) -> None:
        self.session.close()


def open_stage(profile: StageProfile, *, port: str | None = None, address: str | None = None,
               baud_rate: int | None = None, timeout_s: float | None = None,
               limits: dict[str, tuple[float, float]] | None = None) -> Stage:
    """A :class:`Stage` on the serial ``port`` or the TCP ``address``."""
    session = open_line_session(profile.transport, port=port, address=address,
                                baud_rate=baud_rate, timeout_s=timeout_s)
    try:
        return Stage(session, profile, limits=limits)
    except BaseException:
        session.close()
        raise
