"""The simulated instruments over real TCP on 127.0.0.1: framing, faults, bench, CLI.

Plain ``socket`` clients only, so these tests do not depend on tankside.drivers.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
import tomllib

import numpy as np
import pytest

from tankside.monitor.cli import main as cli_main
from tankside.simulators.bench import SimulatedBench
from tankside.simulators.faults import FaultPlan, apply_block_fault
from tankside.simulators.generator import SimulatedGenerator
from tankside.simulators.scene import Drive, Scene
from tankside.simulators.server import InstrumentServer, ServerGroup


class Client:
    def __init__(self, port, timeout=3.0):
        self.sock = socket.create_connection(("127.0.0.1", port), timeout=timeout)
        self.sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        self.buf = b""

    def write(self, line):
        self.sock.sendall(line.encode() + b"\n")

    def _fill(self):
        data = self.sock.recv(1 << 20)
        if not data:
            raise ConnectionError("closed")
        self.buf += data

    def readline(self):
        while b"\n" not in self.buf:
            self._fill()
        line, self.buf = self.buf.split(b"\n", 1)
        return line.decode()

    def query(self, line):
        self.write(line)
        return self.readline()

    def read_exact(self, n):
        while len(self.buf) < n:
            self._fill()
        out, self.buf = self.buf[:n], self.buf[n:]
        return out

    def query_block(self, line):
        self.write(line)
        head = self.read_exact(2)
        assert head[:1] == b"#"
        length = int(self.read_exact(int(head[1:2])))
        data = self.read_exact(length)
        assert self.read_exact(1) == b"\n"
        return data

    def close(self):
        self.sock.close()


@pytest.fixture
def bench():
    # a generator left with its output on by the operator: these tests are of the
    # instruments, not of tankside's drive policy
    with SimulatedBench(seed=2, trigger_period_s=0.005,
                        drive=Drive()) as b:
        yield b


@pytest.fixture
def dig(bench):
    c = Client(bench.digitiser_port)
    yield c
    c.close()


class TestLoopbackOnly:
    @pytest.mark.parametrize("host", ["0.0.0.0", "localhost", "", "192.168.1.10", "::1"])
    def test_refuses_other_hosts(self, host):
        with pytest.raises(ValueError, match="127.0.0.1"):
            InstrumentServer(SimulatedGenerator(Scene()), name="generator", host=host)

    def test_listens_on_loopback_address_only(self, bench):
        for server in (bench.digitiser_server, bench.generator_server):
            assert server.address[0] == "127.0.0.1"
        # Another loopback address reaches the same host but not a socket bound to 127.0.0.1.
        with pytest.raises(OSError):
            socket.create_connection(("127.0.0.2", bench.digitiser_port), timeout=1.0)

    def test_resource_strings(self, bench):
        assert bench.digitiser_resource == f"TCPIP0::127.0.0.1::{bench.digitiser_port}::SOCKET"
        assert bench.generator_resource == f"TCPIP0::127.0.0.1::{bench.generator_port}::SOCKET"
        assert bench.digitiser_port != bench.generator_port


class TestProtocol:
    def test_queries_and_errors(self, dig):
        assert dig.query("*IDN?").startswith("TANKSIDE,SIMDIG-2")
        assert dig.query("acq:poin?;:wav:xinc?") == "10000;4e-09"
        dig.write("BOGUS 1")
        assert dig.query("SYST:ERR?") == '-113,"Undefined header;BOGUS"'
        assert dig.query("SYST:ERR?") == '0,"No error"'

    def test_carriage_return_and_blank_lines(self, dig):
        dig.sock.sendall(b"\n\r\n*IDN?\r\n")
        assert dig.readline().startswith("TANKSIDE")

    def test_block_is_definite_length_int16(self, bench, dig):
        dig.write("ACQ:POIN 4000;:CHAN1:RANG 0.1;:INIT")
        assert dig.query("*OPC?") == "1"
        codes = np.frombuffer(dig.query_block("WAV:DATA? CHAN1"), "<i2")
        assert codes.size == 4000
        assert np.abs(codes).max() * float(dig.query("WAV:YINC?")) > 0.02

    def test_trigger_rate_follows_the_burst_period(self, bench, dig):
        gen = Client(bench.generator_port)
        gen.write("BURS:PER 0.02")
        assert gen.query("BURS:PER?") == "0.02"
        t = time.monotonic()
        for _ in range(5):
            dig.write("INIT")
            assert dig.query("*OPC?") == "1"
        # 5 arm/wait cycles need at least 4 full periods.
        assert time.monotonic() - t >= 4 * 0.02
        gen.close()

    def test_generator_output_off_silences_the_digitiser(self, bench, dig):
        gen = Client(bench.generator_port)
        gen.write("OUTP OFF")
        assert gen.query("OUTP?") == "0"
        dig.write("CHAN1:RANG 0.1;:INIT")
        dig.query("*OPC?")
        v = np.frombuffer(dig.query_block("WAV:DATA?"), "<i2") * float(dig.query("WAV:YINC?"))
        assert np.abs(v).max() < 6 * 0.3e-3
        gen.close()

    def test_two_clients_share_one_device(self, bench, dig):
        other = Client(bench.digitiser_port)
        dig.write("ACQ:POIN 777")
        assert dig.query("*OPC?") == "1"  # the write is done before the other client asks
        assert other.query("ACQ:POIN?") == "777"
        other.close()

    def test_a_client_waiting_for_a_trigger_does_not_lock_others_out(self, bench, dig):
        dig.write("TRIG:LEV 4.5;:INIT")   # above the 3.3 V sync: no trigger will come
        dig.write("*OPC?")
        time.sleep(0.1)
        other = Client(bench.digitiser_port, timeout=1.0)
        assert other.query("*IDN?").startswith("TANKSIDE")
        other.write("ABORt")              # nothing pending any more: *OPC? completes
        assert dig.readline() == "1"
        other.close()

    def test_clean_shutdown_closes_connections_and_frees_port(self):
        b = SimulatedBench(trigger_period_s=0.01)
        c = Client(b.digitiser_port)
        assert c.query("*OPC?") == "1"
        port = b.digitiser_port
        b.close()
        with pytest.raises((ConnectionError, OSError)):
            c.query("*IDN?")
        c.close()
        with InstrumentServer(SimulatedGenerator(Scene()), name="generator", port=port) as again:
            assert again.port == port

    def test_server_group(self):
        group = ServerGroup([InstrumentServer(SimulatedGenerator(Scene()), name="generator")
                             for _ in range(3)])
        with group:
            ports = {s.port for s in group.servers}
            assert len(ports) == 3
            for p in ports:
                c = Client(p)
                assert c.query("*IDN?").startswith("TANKSIDE,SIMGEN-1")
                c.close()


class TestFaults:
    def test_drop_connection(self, bench, dig):
        bench.faults.drop_connection(after_commands=1)
        assert dig.query("*IDN?").startswith("TANKSIDE")
        dig.write("*IDN?")
        with pytest.raises(ConnectionError):
            dig.readline()
        again = Client(bench.digitiser_port)
        assert again.query("*IDN?").startswith("TANKSIDE")  # the instrument is still there
        again.close()
        assert ("digitiser", "drop") in bench.faults.fired

    def test_stall_next_reply(self, bench, dig):
        bench.faults.stall_next_reply(0.4)
        t = time.monotonic()
        assert dig.query("*IDN?").startswith("TANKSIDE")
        assert time.monotonic() - t >= 0.4
        t = time.monotonic()
        dig.query("*IDN?")
        assert time.monotonic() - t < 0.4

    def test_stall_puts_the_stream_out_of_step(self, bench):
        bench.faults.stall_next_reply(0.5)
        c = Client(bench.digitiser_port, timeout=0.2)
        c.write("ACQ:POIN?")
        with pytest.raises(TimeoutError):
            c.readline()
        c.sock.settimeout(2.0)
        # The late reply now answers the next query: the client must resynchronise.
        assert c.query("*IDN?") == "10000"
        assert c.readline().startswith("TANKSIDE")
        c.close()

    @pytest.mark.parametrize("kind", ["bad-digit", "bad-length"])
    def test_malformed_block_header(self, bench, dig, kind):
        bench.faults.malformed_next_block(kind)
        dig.write("ACQ:POIN 100;:INIT")
        dig.query("*OPC?")
        dig.write("WAV:DATA?")
        head = dig.read_exact(2)
        if kind == "bad-digit":
            assert head == b"#Z"
        else:
            assert head == b"#3" and dig.read_exact(3) == b"XXX"

    @pytest.mark.parametrize("close", [False, True])
    def test_short_block(self, bench, dig, close):
        bench.faults.short_next_block(missing_bytes=50, close=close)
        dig.write("ACQ:POIN 100;:INIT")
        dig.query("*OPC?")
        dig.write("WAV:DATA?")
        assert dig.read_exact(5) == b"#3200"
        assert len(dig.read_exact(150)) == 150
        dig.sock.settimeout(0.3)
        with pytest.raises(ConnectionError if close else TimeoutError):
            dig.read_exact(1)

    def test_miss_triggers(self, bench, dig):
        bench.faults.miss_triggers(40)  # 40 x 5 ms = 0.2 s without a trigger
        dig.write("INIT")
        time.sleep(0.1)
        assert dig.query("ACQ:DONE?") == "0"
        time.sleep(0.2)
        assert dig.query("ACQ:DONE?") == "1"

    def test_report_error_for_a_command(self, bench, dig):
        bench.faults.report_error("acquire:points", -222)
        dig.write("ACQ:POIN 5000")
        assert dig.query("ACQ:POIN?") == "10000"   # not carried out
        assert dig.query("SYST:ERR?") == '-222,"Data out of range;injected fault"'
        dig.write("ACQ:POIN 5000")
        assert dig.query("ACQ:POIN?") == "5000"    # one shot only

    def test_report_error_on_a_query_and_executed(self, bench, dig):
        bench.faults.report_error("WAV:XINC?", -200, execute=True)
        assert dig.query("WAV:XINC?") == "4e-09"
        assert dig.query("SYST:ERR?").startswith("-200,")

    def test_faults_on_the_generator_only(self, bench, dig):
        bench.faults.stall_next_reply(0.3, device="generator")
        t = time.monotonic()
        dig.query("*IDN?")
        assert time.monotonic() - t < 0.3
        gen = Client(bench.generator_port)
        gen.query("*IDN?")
        assert time.monotonic() - t >= 0.3
        gen.close()

    def test_pending_and_clear(self):
        plan = FaultPlan()
        plan.miss_triggers(2)
        plan.report_error("VOLT", -222, device="generator")
        assert plan.pending()["digitiser"] == ["miss:2"]
        assert plan.pending()["generator"] == ["error:VOLT=-222"]
        plan.clear()
        assert plan.pending() == {"digitiser": [], "generator": []}
        with pytest.raises(ValueError):
            plan.stall_next_reply(1.0, device="stage")

    def test_apply_block_fault_is_pure(self):
        reply = b"#14abcd\n"
        assert apply_block_fault(reply, "short", None) == (b"#14ab", False)
        assert apply_block_fault(reply, "short-close", 1) == (b"#14abc", True)


class TestBench:
    def test_bench_file(self, bench, tmp_path):
        path = bench.write_bench_file(tmp_path / "bench.toml")
        data = tomllib.loads(path.read_text())
        assert data["digitiser"]["resource"] == bench.digitiser_resource
        assert data["generator"]["resource"] == bench.generator_resource
        assert data["digitiser"]["profile"] == str(bench.digitiser_profile_path)
        assert data["calibration"]["file"] == str(bench.calibration_path)
        for p in (bench.digitiser_profile_path, bench.generator_profile_path,
                  bench.calibration_path):
            assert p.is_file()
        assert data["digitiser"]["range_v"] in tomllib.loads(
            bench.digitiser_profile_path.read_text())["ranges"]["values_v"]

    def test_profile_commands_are_understood(self, bench, dig):
        # Every command of the shipped profile, filled in, is accepted without error.
        profile = tomllib.loads(bench.digitiser_profile_path.read_text())
        values = dict(channel=1, points=2000, rate_hz=2.5e8, range_v=0.1, offset_v=0.0,
                      coupling="DC", impedance_ohm=1e6, source="EXT", level_v=1.0,
                      slope="POS", count=1, delay_s=2.87e-5)
        for key, template in profile["commands"].items():
            command = template.format(**values)
            if key == "fetch_waveform":
                dig.write("INIT")
                dig.query("*OPC?")
                assert len(dig.query_block(command)) == 4000
            elif command.endswith("?"):
                assert dig.query(command)
            else:
                dig.write(command)
            assert dig.query("SYST:ERR?") == '0,"No error"', key
        gen = Client(bench.generator_port)
        gprof = tomllib.loads(bench.generator_profile_path.read_text())
        gvalues = dict(state="ON", amplitude_vpp=1.0, frequency_hz=3.5e6, cycles=3,
                       period_s=0.005)
        for key, template in gprof["commands"].items():
            command = template.format(**gvalues)
            if command.endswith("?"):
                reply = gen.query(command)
                if key == "get_output":
                    assert reply in gprof["values"]["output_on_replies"]
            else:
                gen.write(command)
            assert gen.query("SYST:ERR?") == '0,"No error"', key
        gen.close()

    def test_fixed_ports(self):
        probe = socket.socket()
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
        probe.close()
        try:
            b = SimulatedBench(port=port)
        except OSError:
            pytest.skip("the probed port pair was taken meanwhile")
        with b:
            assert (b.digitiser_port, b.generator_port) == (port, port + 1)

    def test_precomputed_bench_serves_at_once(self):
        with SimulatedBench(precomputed=4) as b:
            c = Client(b.digitiser_port)
            c.write("INIT")
            assert c.query("ACQ:DONE?") == "1"
            blocks = [c.query_block("WAV:DATA?") for _ in range(5)]
            assert blocks[0] == blocks[4] and blocks[0] != blocks[1]
            c.close()


class TestSimulateCommand:
    def test_help(self, capsys):
        with pytest.raises(SystemExit) as exc:
            cli_main(["simulate", "--help"])
        assert exc.value.code == 0
        out = capsys.readouterr().out
        for word in ("--port", "--bench-file", "--seed", "--inject", "N+1", "--no-serial"):
            assert word in out

    def test_short_run_writes_bench_file(self, tmp_path, capsys):
        path = tmp_path / "b.toml"
        assert cli_main(["simulate", "--duration", "0.3", "--bench-file", str(path),
                         "--inject", "stall:0.1", "--inject", "error:ACQ:POIN=-222"]) == 0
        out = capsys.readouterr().out
        assert "TCPIP0::127.0.0.1::" in out
        assert tomllib.loads(path.read_text())["digitiser"]["resource"] in out

    def test_stage_and_thermometer_start_by_default(self, tmp_path, capsys):
        path = tmp_path / "b.toml"
        assert cli_main(["simulate", "--duration", "0.2", "--bench-file", str(path)]) == 0
        out = capsys.readouterr().out
        bench = tomllib.loads(path.read_text())
        for section in ("stage", "thermometer"):
            port = bench[section]["port"]
            assert port.startswith("/dev/") and f"{section:<10} {port} (serial" in out
        assert bench["stage"]["profile"].endswith("sim-stage.toml")
        assert set(bench["stage"]["limits"]) == {"x", "y", "z"}

    @pytest.mark.parametrize("argv, serial", [(["--no-serial"], False), (["--serial"], True)])
    def test_no_serial_leaves_them_out_and_serial_is_the_default(self, tmp_path, capsys,
                                                                  argv, serial):
        path = tmp_path / "b.toml"
        assert cli_main(["simulate", "--duration", "0.2", "--bench-file", str(path),
                         *argv]) == 0
        out = capsys.readouterr().out
        bench = tomllib.loads(path.read_text())
        assert ("stage" in bench) is serial and ("thermometer" in bench) is serial
        assert ("(serial; profile" in out) is serial
        assert "digitiser" in bench and "TCPIP0::127.0.0.1::" in out

    def test_serial_and_no_serial_together_are_refused(self, capsys):
        with pytest.raises(SystemExit) as exc:
            cli_main(["simulate", "--serial", "--no-serial"])
        assert exc.value.code == 2
        assert "not allowed with" in capsys.readouterr().err

    def test_no_pseudo_terminal_is_a_one_line_error(self, monkeypatch, capsys):
        def no_pty():
            raise OSError(24, "Too many open files")

        monkeypatch.setattr("tankside.simulators.pty_device.os.openpty", no_pty)
        with socket.socket() as probe:         # a free port, to see it is let go again
            probe.bind(("127.0.0.1", 0))
            port = probe.getsockname()[1]
        assert cli_main(["simulate", "--duration", "0.2", "--port", str(port)]) == 2
        err = capsys.readouterr().err
        assert "pseudo-terminal" in err and "--no-serial" in err and "Traceback" not in err
        with pytest.raises(ConnectionRefusedError):
            socket.create_connection(("127.0.0.1", port), timeout=1.0).close()

    def test_an_existing_bench_file_is_kept_unless_forced(self, tmp_path, capsys):
        path = tmp_path / "b.toml"
        path.write_text("# hand-edited\n")
        assert cli_main(["simulate", "--duration", "0.2", "--bench-file", str(path)]) == 2
        assert "--force" in capsys.readouterr().err
        assert path.read_text() == "# hand-edited\n"
        assert cli_main(["simulate", "--duration", "0.2", "--bench-file", str(path),
                         "--force"]) == 0
        port = tomllib.loads(path.read_text())["digitiser"]["resource"].split("::")[2]
        assert f"::{port}::" in capsys.readouterr().out      # the ports really served
        assert not list(tmp_path.glob(".*partial"))

    @pytest.mark.parametrize("argv, words", [
        (["--inject", "explode"], "unknown fault"),
        (["--inject", "stall:soon"], "bad value"),
        (["--position-mm", "1,2"], "three numbers"),
    ])
    def test_bad_options_are_one_line_errors(self, capsys, argv, words):
        assert cli_main(["simulate", *argv]) == 2
        err = capsys.readouterr().err
        assert words in err and "Traceback" not in err

    def test_position_option_moves_the_hydrophone(self, capsys):
        assert cli_main(["simulate", "--duration", "0.2", "--position-mm", "0.5,0,2"]) == 0
        assert "(0.5, 0, 2) mm" in capsys.readouterr().out

    @pytest.mark.parametrize("sig, ignore_sigint", [
        (signal.SIGINT, False),
        (signal.SIGINT, True),    # a shell's background job inherits SIGINT ignored
        (signal.SIGTERM, False),
    ])
    def test_signals_stop_cleanly(self, sig, ignore_sigint):
        env = dict(os.environ, PYTHONUNBUFFERED="1")

        def child_setup():
            if ignore_sigint:
                signal.signal(signal.SIGINT, signal.SIG_IGN)

        proc = subprocess.Popen([sys.executable, "-m", "tankside.monitor.cli", "simulate"],
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                                env=env, preexec_fn=child_setup)
        try:
            lines = []
            while not any("running" in ln for ln in lines):
                line = proc.stdout.readline()
                assert line, proc.stderr.read()
                lines.append(line)
            resource = lines[0].split()[1]
            port = int(resource.split("::")[2])
            c = Client(port)
            assert c.query("*IDN?").startswith("TANKSIDE")
            c.close()
            proc.send_signal(sig)
            _, err = proc.communicate(timeout=10)
        finally:
            if proc.poll() is None:
                proc.kill()
        assert proc.returncode == 0
        assert "Traceback" not in err
