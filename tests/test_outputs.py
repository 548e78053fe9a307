"""Exports and replay's new session appear whole or not at all: Ctrl-C (exit 130) or an
error leaves nothing under the output's name, a missing folder or a full disk is one
typed line, and the progress bar is still drawn.

Ctrl-C is a real SIGINT sent to the `tankside` command in its own process, while it
writes: the process is paused (SIGSTOP) as soon as its temporary file appears, the
signal is queued, and the process resumed, so the interrupt lands mid-write every time.
"""

from __future__ import annotations

import dataclasses
import hashlib
import os
import resource
import shutil
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import h5py
import pytest
from session_samples import calibration_text, fake_result, make_raw, write_converted_session

from tankside.monitor.acoustics.calibration import parse_calibration
from tankside.monitor.acoustics.loading import Loading
from tankside.monitor.acoustics.settings import ConversionSettings
from tankside.monitor.cli import main
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.store import SessionReader, SessionStore, session_metadata


def tankside_command() -> list[str]:
    script = Path(sys.executable).with_name("tankside")
    return [str(script)] if script.exists() else [sys.executable, "-m", "tankside.monitor.cli"]


def _many_traces(path: Path, n_traces: int) -> Path:
    """``n_traces`` traces of 512 samples, with results and the calibration replay needs."""
    cal = parse_calibration(calibration_text(), source="cal.csv")
    meta = session_metadata(configuration={}, instruments={}, calibration=cal,
                            loading=Loading(), settings=ConversionSettings(method="deconvolve"),
                            temperature_c=20.0)
    base = [make_raw(i, n=512) for i in range(8)]
    results = [fake_result(i) for i in range(8)]
    store = SessionStore.create(path, meta)
    for seq in range(n_traces):
        store.add_trace(dataclasses.replace(base[seq % 8], seq=seq, time_s=1.8e9 + seq),
                        results[seq % 8])
    store.close("completed", "test", {"traces": n_traces})
    return path


@pytest.fixture(scope="module")
def big(tmp_path_factory) -> Path:
    """Large enough that export and replay take seconds (about 4 MB of results CSV, 15 MB
    of HDF5)."""
    return _many_traces(tmp_path_factory.mktemp("big") / "big.db", 10000)


@pytest.fixture(scope="module")
def medium(tmp_path_factory) -> Path:
    """Larger than LIMIT in every output (about 0.8 MB of results CSV, 3 MB of HDF5)."""
    return _many_traces(tmp_path_factory.mktemp("medium") / "medium.db", 2000)


LIMIT_KB = 512


def parts(folder: Path) -> list[Path]:
    return sorted(folder.glob(".*.part*"))


def _written(folder: Path) -> int:
    total = 0
    for p in parts(folder):
        try:
            total += p.stat().st_size
        except FileNotFoundError:
            pass
    return total


def interrupt_mid_write(argv: list[str], folder: Path, label: str,
                        timeout_s: float = 60.0, signum: int = signal.SIGINT):
    """Run ``tankside argv``; once its progress bar (``label``) is drawn and its temporary
    output exists, pause it, queue ``signum`` (SIGINT: Ctrl-C) and resume it. Returns
    (process result with stderr as text, bytes of temporary output when paused)."""
    proc = subprocess.Popen([*tankside_command(), *argv], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE)
    err = bytearray()

    def collect() -> None:
        for chunk in iter(lambda: os.read(proc.stderr.fileno(), 4096), b""):
            err.extend(chunk)

    reader = threading.Thread(target=collect, daemon=True)
    reader.start()
    deadline = time.monotonic() + timeout_s
    try:
        while f"{label} [".encode() not in err or not _written(folder):
            assert proc.poll() is None, (proc.returncode, bytes(err))
            assert time.monotonic() < deadline, "no progress bar and temporary output"
            time.sleep(0.002)
        os.kill(proc.pid, signal.SIGSTOP)
        written = _written(folder)
        os.kill(proc.pid, signum)
        os.kill(proc.pid, signal.SIGCONT)
        out = proc.stdout.read()
        proc.wait(timeout=timeout_s)
        reader.join(timeout=timeout_s)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        proc.stdout.close()
        proc.stderr.close()
    return subprocess.CompletedProcess(proc.args, proc.returncode, out.decode(),
                                       err.decode()), written


class TestInterrupted:
    @pytest.mark.parametrize("option, name, label", [("--results", "r.csv", "results"),
                                                     ("--hdf5", "s.h5", "hdf5")])
    def test_export_leaves_nothing_and_exits_130(self, big, tmp_path, option, name, label):
        out = tmp_path / name
        proc, written = interrupt_mid_write(
            ["export", str(big), option, str(out), "--progress"], tmp_path, label)
        assert proc.returncode == ExitCode.INTERRUPTED == 130, proc.stderr
        assert not out.exists() and parts(tmp_path) == []
        assert proc.stderr.rstrip().endswith("tankside: interrupted (Ctrl-C)")
        assert "Traceback" not in proc.stderr
        assert f"\r{label} [" in proc.stderr         # the progress bar was being drawn
        assert 0 < written < 2_000_000              # mid-write: the whole is 4 to 15 MB

    def test_sigterm_is_taken_the_same_way(self, big, tmp_path):
        # SIGTERM's default ends the process at once and left the hidden temporary file
        out = tmp_path / "s.h5"
        proc, written = interrupt_mid_write(
            ["export", str(big), "--hdf5", str(out), "--progress"], tmp_path, "hdf5",
            signum=signal.SIGTERM)
        assert proc.returncode == ExitCode.INTERRUPTED, proc.stderr
        assert not out.exists() and parts(tmp_path) == []
        assert proc.stderr.rstrip().endswith("tankside: interrupted (SIGTERM)")
        assert "Traceback" not in proc.stderr and 0 < written

    def test_replay_leaves_nothing_and_keeps_the_old_output(self, big, tmp_path):
        out = tmp_path / "new.db"
        write_converted_session(out, 2, n=512)        # an earlier replay, to be replaced
        before = hashlib.sha256(out.read_bytes()).hexdigest()
        proc, _ = interrupt_mid_write(
            ["replay", str(big), "--out", str(out), "--force", "--progress"], tmp_path,
            "replay")
        assert proc.returncode == ExitCode.INTERRUPTED, proc.stderr
        assert "Traceback" not in proc.stderr and "\rreplay [" in proc.stderr
        assert hashlib.sha256(out.read_bytes()).hexdigest() == before
        assert sorted(p.name for p in tmp_path.iterdir()) == ["new.db"]


class TestErrors:
    def test_an_error_midway_leaves_no_file(self, tmp_path, capsys):
        path = tmp_path / "s.db"
        write_converted_session(path, 4, n=512)
        import sqlite3
        with sqlite3.connect(path) as conn:
            conn.execute("UPDATE traces SET n = 3 WHERE seq = 3")   # the last trace is bad
        out = tmp_path / "out"
        out.mkdir()
        assert main(["export", str(path), "--hdf5", str(out / "s.h5"), "--trace", "3",
                     "--out", str(out / "t.csv")]) == ExitCode.USAGE
        assert "seq 3, column n" in capsys.readouterr().err
        assert list(out.iterdir()) == []
        assert main(["replay", str(path), "--out", str(out / "new.db")]) == ExitCode.USAGE
        assert list(out.iterdir()) == []

    @pytest.mark.parametrize("args", [["--results", "r.csv"], ["--hdf5", "s.h5"],
                                      ["--trace", "0", "--out", "t.csv"],
                                      ["--calibration-out", "cal.csv"]],
                             ids=["results", "hdf5", "trace", "calibration"])
    def test_missing_folder_is_one_line(self, tmp_path, capsys, args):
        path = tmp_path / "s.db"
        write_converted_session(path, 2, n=512)
        missing = tmp_path / "no" / "such"
        args = [str(missing / a) if "." in a else a for a in args]
        assert main(["export", str(path), *args]) == ExitCode.USAGE
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and f"the folder {missing} does not exist" in err
        assert not (tmp_path / "no").exists()

    def test_replay_into_a_missing_folder(self, tmp_path, capsys):
        path = tmp_path / "s.db"
        write_converted_session(path, 2, n=512)
        out = tmp_path / "no" / "new.db"
        assert main(["replay", str(path), "--out", str(out)]) == ExitCode.USAGE
        assert f"the folder {out.parent} does not exist" in capsys.readouterr().err

    def test_a_stale_wal_beside_a_replaced_session_is_not_taken_for_the_new_ones(
            self, tmp_path):
        src, out = tmp_path / "s.db", tmp_path / "new.db"
        write_converted_session(src, 3, n=512)
        write_converted_session(out, 1, n=512)
        Path(f"{out}-wal").write_bytes(b"\x37\x7f\x06\x82" + bytes(60))   # left by a crash
        assert main(["replay", str(src), "--out", str(out), "--force"]) == ExitCode.OK
        assert not Path(f"{out}-wal").exists()
        with SessionReader(out) as reader:
            assert reader.trace_count() == 3 and reader.integrity_check() == "ok"


def _limited(limit_bytes: int):
    def apply():
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit_bytes, limit_bytes))
    return apply


class TestFullDisk:
    """A write refused for room: a file-size limit (any user), and a real full file
    system (a 512 kB tmpfs in a private mount namespace, as root)."""

    @pytest.mark.parametrize("option, name", [("--results", "r.csv"), ("--hdf5", "s.h5")])
    def test_file_size_limit(self, medium, tmp_path, option, name):
        out = tmp_path / name
        proc = subprocess.run([*tankside_command(), "export", str(medium), option, str(out)],
                              capture_output=True, text=True, timeout=120,
                              preexec_fn=_limited(LIMIT_KB * 1024))
        assert proc.returncode == ExitCode.USAGE, proc.stderr
        err = proc.stderr.strip()
        assert len(err.splitlines()) == 1 and "Traceback" not in err
        assert err.startswith(f"tankside: error: {out}: writing")
        assert not out.exists() and parts(tmp_path) == []

    def test_replay_file_size_limit_is_a_store_error(self, medium, tmp_path):
        out = tmp_path / "new.db"
        proc = subprocess.run([*tankside_command(), "replay", str(medium), "--out", str(out)],
                              capture_output=True, text=True, timeout=120,
                              preexec_fn=_limited(LIMIT_KB * 1024))
        assert proc.returncode == ExitCode.STORE, proc.stderr
        err = proc.stderr.strip()
        assert len(err.splitlines()) == 1 and "Traceback" not in err
        assert f"{out}: disk full or write failed" in err
        assert sorted(p.name for p in tmp_path.iterdir()) == []

    @pytest.mark.skipif(os.geteuid() != 0 or shutil.which("unshare") is None,
                        reason="a tmpfs mount needs root and unshare")
    @pytest.mark.parametrize("args, code, message", [
        (["--results", "r.csv"], ExitCode.USAGE,
         "r.csv: writing failed (no space left on the disk); nothing written under that name"),
        (["--hdf5", "s.h5"], ExitCode.USAGE,
         "s.h5: writing the HDF5 file failed (no space left on the disk)"),
        (["replay", "--out", "new.db"], ExitCode.STORE, "new.db: disk full or write failed"),
    ], ids=["results", "hdf5", "replay"])
    def test_full_file_system(self, medium, tmp_path, args, code, message):
        folder = tmp_path / "small"
        folder.mkdir()
        command = "replay" if args[0] == "replay" else "export"
        args = [str(folder / a) if "." in a else a for a in args if a != "replay"]
        script = (f'mount -t tmpfs -o size={LIMIT_KB}k tankside-test {folder} || exit 99; "$@"; '
                  f'rc=$?; ls -A {folder}; exit $rc')
        proc = subprocess.run(["unshare", "-m", "sh", "-c", script, "sh", *tankside_command(),
                               command, str(medium), *args], capture_output=True, text=True,
                              timeout=120)
        if proc.returncode == 99:
            pytest.skip("tmpfs cannot be mounted here")
        assert proc.returncode == code, proc.stderr
        err = proc.stderr.strip()
        assert len(err.splitlines()) == 1 and "Traceback" not in err
        assert f"{folder}/{message}" in err
        assert proc.stdout.split() == []             # nothing left on the full disk


def test_a_complete_export_is_readable_under_its_name(tmp_path):
    path = tmp_path / "s.db"
    write_converted_session(path, 3, n=512)
    out = tmp_path / "s.h5"
    assert main(["export", str(path), "--hdf5", str(out)]) == ExitCode.OK
    with h5py.File(out, "r") as f:
        assert f["traces/codes"].shape == (3 * 512,)   # two byte orders: end to end
    assert parts(tmp_path) == []


_HDF5_THROUGH_FAILURES = """
import errno, os, sys
import numpy as np
import h5py
from tankside.monitor.record.outputs import GuardedFile

class Limited:
    # a file on a disk with `room` bytes: a write past it is cut short, the next refused
    def __init__(self, path, room):
        self.f = open(path, "w+b", buffering=0)
        self.room = room
    def write(self, data):
        room = self.room - self.f.tell()
        if room <= 0:
            raise OSError(errno.ENOSPC, "No space left on device")
        return self.f.write(memoryview(data)[:room])
    def __getattr__(self, name):
        return getattr(self.f, name)

failed = 0
for room in [*range(0, 60_000, 3_000), *range(60_000, 1_500_000, 90_000)]:
    raw = Limited(sys.argv[1], room)
    guard = GuardedFile(raw)
    f = h5py.File(guard, "w")
    try:
        f.attrs["format"] = "test"
        g = f.create_group("metadata")
        for k in range(30):
            g.attrs[f"key{k}"] = "x" * 200
        codes = f.create_group("traces").create_dataset("codes", shape=(400, 512),
                                                        dtype="<i2", chunks=(1, 512))
        for i in range(400):
            codes[i] = np.arange(512, dtype="<i2") + i
            guard.check()
        for k in range(12):
            f["traces"].create_dataset(f"column{k}", data=np.arange(400.0) * k)
        guard.check()
        f.close()
        guard.check()
        with h5py.File(sys.argv[1], "r") as back:          # complete: it reads back
            assert back["traces/codes"][399, 1] == 400
    except OSError as err:
        assert err.errno == errno.ENOSPC, err
        failed += 1
        guard.abandon()
        f.close()
    raw.f.close()
print(failed)
"""


def test_hdf5_writes_through_failures_at_every_point(tmp_path):
    """The guard keeps HDF5 whole when the disk fills at any point of writing a file:
    at its creation, in its metadata, among its chunks or at its close (without it,
    HDF5 2.0.0 with h5py 3.16.0 crashes the process at exit)."""
    proc = subprocess.run([sys.executable, "-c", _HDF5_THROUGH_FAILURES,
                           str(tmp_path / "x.h5")], capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == 0 and proc.stderr == "", proc.stderr[-2000:]
    failed = int(proc.stdout)
    assert 20 < failed < 20 + 16          # the small rooms fail; the largest ones fit


class TestCtrlCBetweenSteps:
    """SIGINT during a job only sets a flag, taken at the next step: a KeyboardInterrupt
    raised inside a callback run as an object is freed would be printed and dropped."""

    def test_taken_at_the_next_step_and_the_handler_restored(self):
        from tankside.monitor.progress import StopSignals, bar_factory

        before = signal.getsignal(signal.SIGINT)
        steps_done = 0
        with pytest.raises(KeyboardInterrupt), StopSignals() as stops:
            with bar_factory(False, check=stops.check)(5, "job") as bar:
                for step in range(5):
                    if step == 2:
                        os.kill(os.getpid(), signal.SIGINT)
                        time.sleep(0.01)          # delivered here, and only noted
                        steps_done = step
                    bar.update()
        assert steps_done == 2 and stops.asked == "Ctrl-C"
        assert signal.getsignal(signal.SIGINT) is before

    def test_sigterm_is_noted_like_ctrl_c_and_both_handlers_restored(self):
        from tankside.monitor.progress import Interrupted, StopSignals

        before = {s: signal.getsignal(s) for s in (signal.SIGINT, signal.SIGTERM)}
        with pytest.raises(Interrupted) as caught, StopSignals() as stops:
            os.kill(os.getpid(), signal.SIGTERM)
            time.sleep(0.01)                      # delivered here, and only noted
            assert stops.asked == "SIGTERM"
        assert caught.value.signal_name == "SIGTERM"
        assert {s: signal.getsignal(s) for s in before} == before

    def test_a_job_that_ended_first_still_reports_it_and_a_second_press_is_at_once(self):
        from tankside.monitor.progress import StopSignals

        with pytest.raises(KeyboardInterrupt), StopSignals():
            os.kill(os.getpid(), signal.SIGINT)
            time.sleep(0.01)
        reached = []
        with pytest.raises(KeyboardInterrupt), StopSignals():
            os.kill(os.getpid(), signal.SIGINT)
            time.sleep(0.01)
            reached.append("after the first")
            os.kill(os.getpid(), signal.SIGINT)
            time.sleep(0.05)
            reached.append("after the second")
        assert reached == ["after the first"]
