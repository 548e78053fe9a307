"""The line session, stage profiles and the stage driver: transcripts against a scripted
transport, then the simulated stage on a real pty opened by pyserial."""

from __future__ import annotations

import math
import socket
import threading
import time

import pytest

from tankside.drivers.errors import (
    ConnectionLost,
    InstrumentReportedError,
    InstrumentTimeout,
    LimitError,
    ProfileError,
    ProtocolError,
    SettingError,
)
from tankside.drivers.line import LineSession, TcpLineTransport
from tankside.drivers.stage import Stage, load_stage_profile, open_stage, parse_stage_profile
from tankside.simulators.bench import PROFILE_DIR as SIM_PROFILES
from tankside.simulators.scene import Scene
from tankside.simulators.stage import COUNTS_PER_MM, SimulatedStage, travelled

SIM_STAGE = SIM_PROFILES / "sim-stage.toml"


class ScriptedTransport:
    """Replies from a script: each write is checked against the next expected command."""

    name = "scripted"

    def __init__(self, script: list[tuple[str, str | None]], terminator: bytes = b"\r"):
        self.script = list(script)
        self.terminator = terminator
        self.sent: list[str] = []
        self._pending = bytearray()
        self.closed = False

    def write(self, data: bytes) -> None:
        text = data.decode("ascii")
        assert text.endswith("\r")
        line = text[:-1]
        self.sent.append(line)
        expected, reply = self.script.pop(0)
        assert line == expected, (line, expected)
        if reply is not None:
            self._pending += reply.encode("latin-1") + self.terminator

    def read_until(self, terminator: bytes, timeout_s: float) -> bytes:
        end = self._pending.find(terminator)
        if end < 0:
            out = bytes(self._pending)
            self._pending.clear()
            return out
        out = bytes(self._pending[:end + len(terminator)])
        del self._pending[:end + len(terminator)]
        return out

    def reset_input(self) -> None:
        self._pending.clear()

    def close(self) -> None:
        self.closed = True


def stage_on(script, profile=None, **kw) -> tuple[Stage, ScriptedTransport]:
    transport = ScriptedTransport(script)
    session = LineSession(transport, write_terminator="\r", read_terminator="\r",
                          timeout_s=0.1)
    return Stage(session, profile or load_stage_profile(SIM_STAGE), **kw), transport


# ---------------------------------------------------------------- line session
class TestLineSession:
    def test_query_strips_the_terminator_and_blanks(self):
        t = ScriptedTransport([("WHO?", "  SIMSTAGE-3 x ")])
        assert LineSession(t, write_terminator="\r", read_terminator="\r").query("WHO?") == \
            "SIMSTAGE-3 x"

    def test_no_reply_is_a_timeout_naming_the_command(self):
        t = ScriptedTransport([("X AT?", None)])
        with pytest.raises(InstrumentTimeout, match="no reply to 'X AT\\?'"):
            LineSession(t, write_terminator="\r", read_terminator="\r",
                        timeout_s=0.01).query("X AT?")

    def test_non_ascii_reply_is_a_protocol_error(self):
        t = ScriptedTransport([("X AT?", "12\xff3")])
        with pytest.raises(ProtocolError, match="garbled reply"):
            LineSession(t, write_terminator="\r", read_terminator="\r").query("X AT?")

    @pytest.mark.parametrize("line", ["X GO 1;HALT", "X GO 1\rHALT", "X GO \u00b5"])
    def test_command_text_is_checked_before_sending(self, line):
        t = ScriptedTransport([])
        with pytest.raises(ProtocolError, match="not sent"):
            LineSession(t, write_terminator="\r").write(line)
        assert t.sent == []

    def test_tcp_transport_on_loopback(self):
        server = socket.socket()
        server.bind(("127.0.0.1", 0))
        server.listen(1)

        def serve():
            conn, _ = server.accept()
            with conn:
                data = b""
                while not data.endswith(b"\n"):
                    data += conn.recv(100)
                conn.sendall(b"part")          # a reply in two pieces
                time.sleep(0.02)
                conn.sendall(b"ial 42\n")

        thread = threading.Thread(target=serve)
        thread.start()
        try:
            transport = TcpLineTransport.from_address(f"127.0.0.1:{server.getsockname()[1]}")
            session = LineSession(transport, timeout_s=2.0)
            assert session.query("PING?") == "partial 42"
            thread.join(2)
            with pytest.raises(ConnectionLost, match="closed the connection"):
                session.read_line()
            session.close()
        finally:
            server.close()

    def test_tcp_address_must_be_host_and_port(self):
        with pytest.raises(ValueError, match="host:port"):
            TcpLineTransport.from_address("127.0.0.1")


# ---------------------------------------------------------------- profiles
GOOD = SIM_STAGE.read_text()


class TestStageProfile:
    def test_shipped_profiles_load(self):
        from tankside.drivers.profile import PROFILE_DIR
        sim = load_stage_profile(SIM_STAGE)
        assert [a.name for a in sim.axes] == ["x", "y", "z"]
        template = load_stage_profile(PROFILE_DIR / "line" / "generic-line-stage.toml")
        assert template.transport.read_terminator == "\r\n"
        assert "error_query" in template.commands

    @pytest.mark.parametrize("change, key", [
        (("move_absolute = \"{axis} GO {counts}\"\n", ""), "[commands] move_absolute"),
        (("'^(?P<counts>[-+]?\\d+)$'", "'^(?P<count>\\d+)$'"), "[replies] position"),
        (("timeout_s = 0.5", "timeout_s = -1"), "[transport] timeout_s"),
        (("read_terminator = \"\\r\"", "read_terminator = \";\""), "[transport] read_terminator"),
        (("counts_per_mm = 1000.0", "counts_per_mm = 0"), "[axes.x] counts_per_mm"),
        (("{axis} AT?", "{axis} AT? {speed}"), "[commands] query_position"),
        (("kind = \"stage\"", "kind = \"digitiser\""), "[instrument] kind"),
        (("[motion]", "[motion]\nsettle = 1"), "[motion] settle"),
    ])
    def test_a_bad_profile_names_file_and_key(self, change, key):
        old, new = change
        assert old in GOOD
        with pytest.raises(ProfileError) as caught:
            parse_stage_profile(GOOD.replace(old, new, 1), "my-stage.toml")
        assert str(caught.value).startswith(f"my-stage.toml: {key}")

    def test_a_profile_with_query_commands_only_is_passive_and_never_moves(self):
        text = "\n".join(line for line in GOOD.splitlines()
                         if not line.startswith(("move_", "home", "stop", "set_velocity")))
        profile = parse_stage_profile(text, "watch-only.toml")
        assert profile.passive and not parse_stage_profile(GOOD).passive
        stage, t = stage_on([], profile=profile)
        with pytest.raises(SettingError, match="passive"):
            stage.move_to({"x": 1.0})
        with pytest.raises(SettingError, match="passive"):
            stage.move_by({"x": 1.0})
        stage.stop()                # nothing to send: the program that moves it stops it
        assert t.sent == []

    def test_a_profile_that_moves_must_say_how_to_stop(self):
        with pytest.raises(ProfileError, match=r"\[commands\] stop: required with a move"):
            parse_stage_profile(GOOD.replace('stop = "HALT"\n', ""), "s.toml")

    def test_error_query_needs_a_no_error_pattern(self):
        text = GOOD.replace("set_velocity =", 'error_query = "ERR?"\nset_velocity =')
        with pytest.raises(ProfileError, match="no_error: required"):
            parse_stage_profile(text, "s.toml")


# ---------------------------------------------------------------- transcripts
class TestStageTranscripts:
    def test_move_in_mm_becomes_counts(self):
        stage, t = stage_on([("X GO 1500", "OK"), ("Z GO -250", "OK")])
        stage.move_to({"x": 1.5, "z": -0.25})
        assert t.sent == ["X GO 1500", "Z GO -250"]

    def test_position_in_mm_from_the_declared_pattern(self):
        stage, _ = stage_on([("X AT?", "1500"), ("Y AT?", "-20"), ("Z AT?", "+7")])
        assert stage.position() == {"x": 1.5, "y": -0.02, "z": 0.007}

    def test_a_target_outside_the_soft_limits_sends_nothing(self):
        stage, t = stage_on([], limits={"x": (-10, 10), "z": (0, 80)})
        with pytest.raises(LimitError, match="axis z: target -1 mm is outside the soft "
                                             "limits 0 to 80 mm; nothing sent"):
            stage.move_to({"x": 5.0, "z": -1.0})      # x is fine, but nothing moves
        with pytest.raises(LimitError, match="not a finite number"):
            stage.move_to({"x": math.nan})
        assert t.sent == []

    def test_a_relative_move_is_checked_at_its_end_point(self):
        script = [("X AT?", "9000"), ("Y AT?", "0"), ("Z AT?", "0")]
        stage, t = stage_on(script, limits={"x": (-10, 10)})
        with pytest.raises(LimitError, match="target 11 mm"):
            stage.move_by({"x": 2.0})
        assert t.sent == ["X AT?", "Y AT?", "Z AT?"]       # only read, never moved

    def test_unknown_axis_is_a_setting_error(self):
        stage, t = stage_on([])
        with pytest.raises(SettingError, match="no axis 'w'"):
            stage.move_to({"w": 1.0})
        assert t.sent == []

    def test_error_reply_is_reported_with_code_and_message(self):
        stage, _ = stage_on([("X GO 99000", "ERR 3 beyond travel")])
        with pytest.raises(InstrumentReportedError) as caught:
            stage.move_to({"x": 99.0})
        assert caught.value.code == 3 and caught.value.description == "beyond travel"
        assert caught.value.command == "X GO 99000"

    def test_a_reply_matching_no_pattern_is_a_protocol_error(self):
        stage, _ = stage_on([("X AT?", "twelve")])
        with pytest.raises(ProtocolError, match="does not match \\[replies\\] position"):
            stage.position()

    def test_stop_is_one_line_for_all_axes(self):
        stage, t = stage_on([("HALT", "OK")])
        stage.stop()
        assert t.sent == ["HALT"]

    def test_error_query_after_each_command(self):
        text = GOOD.replace("set_velocity =", 'error_query = "ERR?"\nset_velocity =') \
            .replace("acknowledge = '^OK$'\n", "no_error = '^0$'\n")
        profile = parse_stage_profile(text, "q.toml")
        t = ScriptedTransport([("X GO 10", None), ("ERR?", "0"),
                               ("Y GO 10", None), ("ERR?", "ERR 5 motor off")])
        stage = Stage(LineSession(t, write_terminator="\r", read_terminator="\r"), profile)
        with pytest.raises(InstrumentReportedError, match="motor off"):
            stage.move_to({"x": 0.01, "y": 0.01})


# ---------------------------------------------------------------- on a pty
@pytest.fixture
def sim():
    scene = Scene()
    with SimulatedStage(scene, focus_mm=(0.0, 0.0, 10.0)) as device:
        yield device, scene


@pytest.fixture
def stage(sim):
    device, _ = sim
    s = open_stage(load_stage_profile(SIM_STAGE), port=device.device_path,
                   limits={"x": (-20, 20), "y": (-20, 20), "z": (0, 40)})
    yield s
    s.close()


def test_trapezoid_matches_the_kinematics():
    # distance covered at constant acceleration a from rest: a t^2 / 2; a long move
    # lasts d / v + v / a (common kinematics, checked here against the piecewise form)
    d, v, a = 10_000.0, 20_000.0, 200_000.0
    assert travelled(d, v, a, 0.05) == pytest.approx(0.5 * a * 0.05 ** 2)
    assert travelled(d, v, a, d / v + v / a) == pytest.approx(d)
    assert travelled(d, v, a, d / v + v / a - 0.01) < d
    short = 1000.0                     # triangular: peak at sqrt(d / a)
    assert travelled(short, v, a, math.sqrt(short / a)) == pytest.approx(short / 2)


class TestOnThePty:
    def test_identify_and_a_move_that_takes_real_time(self, sim, stage):
        device, scene = sim
        assert stage.identify().startswith("SIMSTAGE-3")
        t0 = time.monotonic()
        stage.move_to({"x": 5.0, "z": 12.0})
        assert stage.is_moving()
        end = stage.wait_until_still(5.0)
        elapsed = time.monotonic() - t0
        # 5 mm at 20 mm/s with 200 mm/s^2: 5/20 + 20/200 = 0.35 s for x (the longer move)
        assert elapsed >= 0.35 - 0.02
        assert end == pytest.approx({"x": 5.0, "y": 0.0, "z": 12.0}, abs=1.0 / COUNTS_PER_MM)
        # the scene's hydrophone is where the stage is, relative to the focus, in m
        assert scene.position_m == pytest.approx((5e-3, 0.0, 2e-3), abs=1e-6)

    def test_stop_halts_a_move_part_way(self, sim, stage):
        device, _ = sim
        stage.move_to({"x": 15.0})
        time.sleep(0.2)
        stage.stop()
        assert not stage.is_moving()
        x = stage.position()["x"]
        assert 0.5 < x < 10.0
        time.sleep(0.1)
        assert stage.position()["x"] == x               # it stays where it stopped
        stage.stop()                                     # a stopped stage takes it too

    def test_soft_limits_send_nothing_to_the_device(self, sim, stage):
        device, _ = sim
        before = len(device.received)
        with pytest.raises(LimitError):
            stage.move_to({"z": 45.0})
        time.sleep(0.05)
        assert len(device.received) == before

    def test_travel_beyond_the_hardware_is_an_instrument_error(self, sim):
        device, _ = sim
        s = open_stage(load_stage_profile(SIM_STAGE), port=device.device_path)  # no limits
        try:
            with pytest.raises(InstrumentReportedError, match="beyond travel"):
                s.move_to({"x": 60.0})
        finally:
            s.close()

    def test_a_stall_is_reported_at_the_next_command(self, sim, stage):
        device, _ = sim
        device.stall_next_move("X", 0.3)
        stage.move_to({"x": 4.0})
        deadline = time.monotonic() + 3
        while device.position_mm()["x"] < 1.19 and time.monotonic() < deadline:
            time.sleep(0.02)
        time.sleep(0.05)
        with pytest.raises(InstrumentReportedError) as caught:
            stage.position()
        assert caught.value.code == 7 and "stalled" in caught.value.description
        assert stage.position()["x"] == pytest.approx(1.2, abs=0.002)

    def test_garbled_and_silent_replies_are_typed(self, sim, stage):
        device, _ = sim
        device.garble_next_reply()
        with pytest.raises(ProtocolError, match="garbled"):
            stage.position()
        stage.session.resync()
        device.go_silent()
        stage.session.timeout_s = 0.1
        with pytest.raises(InstrumentTimeout, match="no reply"):
            stage.is_moving()
        device.go_silent(False)
        stage.session.resync()
        assert stage.position()["x"] == 0.0

    def test_a_lost_connection_is_connection_lost(self, sim, stage):
        device, _ = sim
        device.disconnect()
        with pytest.raises(ConnectionLost):
            for _ in range(3):          # the first write may still be buffered
                stage.position()
