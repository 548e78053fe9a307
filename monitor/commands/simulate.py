"""``tankside simulate``: run the simulated bench in the foreground until Ctrl-C."""

from __future__ import annotations

import argparse
import math
import signal
import sys
import threading
import time
from pathlib import Path

from ...drivers.profile import PROFILE_DIR
from ..errors import ConfigError
from .options import SECONDS, SEED, number

FAULT_KINDS = ("drop", "stall", "bad-block", "short-block", "miss", "error")

# The simulated digitiser's dialects (simulators/dialects.py) and the profile that speaks
# each; None: the bench's own (simulators/profiles/sim-digitiser.toml). A test checks that
# these are the simulator's dialects.
DIALECT_PROFILES = {
    "simdig": None,
    "sense-fetch": PROFILE_DIR / "example-sense-fetch-digitiser.toml",
    "channel-waveform": PROFILE_DIR / "example-channel-waveform-digitiser.toml",
}

HELP = """\
Start a simulated digitiser and signal generator on 127.0.0.1, sharing one invented
acoustic scene (a focused 3.5 MHz source, an invented needle hydrophone), and beside them
a simulated positioning stage (it moves the hydrophone through the invented beam) and a
simulated water thermometer, each on a pseudo-terminal. Prints each instrument's VISA
resource string or serial device path. Runs until Ctrl-C (or SIGTERM).

With --port N the digitiser listens on N and the generator on N+1; by default two free
ports are picked. --bench-file writes a bench description (resources, serial ports,
profiles, calibration file, the stage's soft limits) that `tankside watch --bench` and
other commands take. --no-serial leaves the stage and thermometer out.

--dialect picks the digitiser's command words: simdig (its own, the default),
sense-fetch or channel-waveform (the two example profiles in drivers/profiles/, which
the bench file then names).

Faults (--inject, repeatable) are armed on the digitiser (or --inject-device) at start,
and again every --inject-every seconds if given:
  drop              close the connection on the next command
  stall:SECONDS     send the next reply SECONDS late
  bad-block         break the header of the next waveform block
  short-block       send only half of the next waveform block
  miss:N            the next acquisition misses N triggers
  error:HEADER=CODE the next HEADER command reports SCPI error CODE (e.g. error:ACQ:POIN=-222)
"""


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "simulate", help="run the simulated digitiser, generator, stage and thermometer",
        description=HELP, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--port", type=number(low=0, high=65534, whole=True), default=0,
                   metavar="N",
                   help="digitiser TCP port (generator on N+1); default 0 picks free ports")
    p.add_argument("--bench-file", metavar="PATH",
                   help="write the bench TOML for these instruments to PATH (a new file; "
                        "see --force)")
    p.add_argument("--force", action="store_true",
                   help="with --bench-file: overwrite an existing file (it may be a "
                        "hand-edited bench, or one another simulate is serving)")
    serial = p.add_mutually_exclusive_group()
    serial.add_argument("--no-serial", dest="serial", action="store_false", default=True,
                        help="start no simulated stage or thermometer (by default both run, "
                             "each on a pseudo-terminal; their device paths are printed and "
                             "[stage] and [thermometer] written into the bench file)")
    # --serial was the way to ask for them before they became the default
    serial.add_argument("--serial", dest="serial", action="store_true", default=True,
                        help="the default; accepted for older scripts")
    p.add_argument("--dialect", choices=tuple(DIALECT_PROFILES), default="simdig",
                   help="the simulated digitiser's command words (default simdig)")
    p.add_argument("--seed", type=SEED, default=0, metavar="N",
                   help="seed of the simulated noise and trigger jitter (default 0)")
    p.add_argument("--trigger-period", type=number(low=1e-4, high=100.0), default=None,
                   metavar="SECONDS",
                   help="burst (trigger) period at start, s (default 0.05, 20 traces/s)")
    p.add_argument("--position-mm", default=None, metavar="X,Y,Z",
                   help="hydrophone position relative to the focus, mm (default 0,0,0; "
                        "z points away from the source)")
    p.add_argument("--inject", action="append", default=[], metavar="KIND[:VALUE]",
                   help="arm a fault (see the list above); repeatable")
    p.add_argument("--inject-device", choices=("digitiser", "generator"), default="digitiser",
                   help="instrument the --inject faults apply to (default digitiser)")
    p.add_argument("--inject-every", type=number(low=0.01, high=1e6), default=None,
                   metavar="SECONDS",
                   help="re-arm the --inject faults every SECONDS (default: once, at start)")
    p.add_argument("--duration", type=SECONDS, default=None, metavar="SECONDS",
                   help="stop by itself after SECONDS (default: run until Ctrl-C)")
    p.set_defaults(func=run)


def parse_fault(text: str) -> tuple[str, str]:
    """Split ``KIND[:VALUE]`` and check it; raises ConfigError on a bad fault."""
    kind, _, value = text.partition(":")
    if kind not in FAULT_KINDS:
        raise ConfigError(f"--inject {text!r}: unknown fault (expected one of "
                          f"{', '.join(FAULT_KINDS)})")
    try:
        if kind == "stall":
            if float(value) < 0:
                raise ValueError
        elif kind == "miss":
            if int(value) < 1:
                raise ValueError
        elif kind == "error":
            header, _, code = value.rpartition("=")
            if not header:
                raise ValueError
            int(code)
        elif value:
            raise ValueError
    except ValueError as err:
        raise ConfigError(f"--inject {text!r}: bad value for {kind}") from err
    return kind, value


def parse_position_mm(text: str) -> tuple[float, float, float]:
    """``"X,Y,Z"`` in mm -> metres; raises ConfigError."""
    parts = text.split(",")
    try:
        if len(parts) != 3:
            raise ValueError
        x, y, z = (float(v) * 1e-3 for v in parts)
    except ValueError as err:
        raise ConfigError(f"--position-mm {text!r}: expected three numbers X,Y,Z in mm") from err
    if max(abs(x), abs(y), abs(z)) > 0.04:
        raise ConfigError(f"--position-mm {text!r}: the invented tank allows at most 40 mm "
                          "from the focus on each axis")
    return x, y, z


def arm(faults, parsed: list[tuple[str, str]], device: str) -> None:
    for kind, value in parsed:
        if kind == "drop":
            faults.drop_connection(device=device)
        elif kind == "stall":
            faults.stall_next_reply(float(value), device=device)
        elif kind == "bad-block":
            faults.malformed_next_block(device=device)
        elif kind == "short-block":
            faults.short_next_block(device=device)
        elif kind == "miss":
            faults.miss_triggers(int(value), device=device)
        elif kind == "error":
            header, _, code = value.rpartition("=")
            faults.report_error(header, int(code), device=device)


def run(args) -> int:
    from ...simulators.bench import PROFILE_DIR as SERIAL_PROFILES
    from ...simulators.bench import SimulatedBench
    from ...simulators.pty_device import PtyUnavailable

    parsed = [parse_fault(text) for text in args.inject]
    position = parse_position_mm(args.position_mm) if args.position_mm else None
    if args.bench_file and not args.force and Path(args.bench_file).exists():
        raise ConfigError(f"--bench-file {args.bench_file}: the file exists (a hand-edited "
                          "bench, or another simulate's); choose a new name or add --force")
    bench = SimulatedBench(seed=args.seed, port=args.port,
                           trigger_period_s=args.trigger_period, start=False,
                           stage=args.serial, thermometer=args.serial, dialect=args.dialect)
    profile = DIALECT_PROFILES[args.dialect]
    if profile is not None:
        bench.digitiser_profile_path = profile
    if position is not None:       # before the start: the stage starts there
        bench.scene.set_position_m(*position)
    try:
        bench.start()
    except PtyUnavailable as err:
        raise ConfigError(f"{err.strerror}; --no-serial starts the bench without the "
                          "stage and thermometer") from err
    except OSError as err:
        raise ConfigError(f"cannot listen on 127.0.0.1 port {args.port}: {err.strerror}") from err
    stop = threading.Event()

    def on_signal(signum, frame):
        stop.set()

    # Both signals set the same event, so Ctrl-C works even where SIGINT was inherited
    # as ignored (a shell's background job).
    previous = {}
    for sig in (signal.SIGINT, signal.SIGTERM):
        try:
            previous[sig] = signal.signal(sig, on_signal)
        except ValueError:  # not the main thread: Ctrl-C stays a KeyboardInterrupt there
            break
    try:
        print(f"digitiser  {bench.digitiser_resource}", flush=True)
        print(f"generator  {bench.generator_resource}", flush=True)
        print(f"profiles   {bench.digitiser_profile_path}", flush=True)
        print(f"           {bench.generator_profile_path}", flush=True)
        print(f"calibration {bench.calibration_path} (invented demo hydrophone)", flush=True)
        if bench.stage is not None and bench.thermometer is not None:
            print(f"stage      {bench.stage.device_path} (serial; profile "
                  f"{SERIAL_PROFILES / 'sim-stage.toml'})", flush=True)
            print(f"thermometer {bench.thermometer.device_path} (serial; profile "
                  f"{SERIAL_PROFILES / 'sim-thermometer.toml'})", flush=True)
        d = bench.scene.drive
        x, y, z = (1e3 * v for v in bench.scene.position_m)
        print(f"scene      {d.burst_cycles} cycles at {d.frequency_hz / 1e6:g} MHz, "
              f"{d.amplitude_vpp:g} Vpp, output {'on' if d.output_on else 'off'}, "
              f"{1 / d.burst_period_s:g} bursts/s; hydrophone at ({x:g}, {y:g}, {z:g}) mm "
              "from the focus", flush=True)
        if args.bench_file:
            try:
                path = bench.write_bench_file(args.bench_file)
            except OSError as err:
                raise ConfigError(f"--bench-file {args.bench_file}: {err.strerror}") from err
            print(f"bench file {path.resolve()}", flush=True)
        arm(bench.faults, parsed, args.inject_device)
        print("running; Ctrl-C to stop", flush=True)
        now = time.monotonic()
        deadline = now + args.duration if args.duration is not None else math.inf
        every = args.inject_every if (args.inject_every and parsed) else math.inf
        next_arm = now + every
        try:
            while not stop.wait(0.1):
                now = time.monotonic()
                if now >= next_arm:
                    arm(bench.faults, parsed, args.inject_device)
                    next_arm = now + every
                if now >= deadline:
                    break
        except KeyboardInterrupt:
            pass
        print("stopped", file=sys.stderr, flush=True)
        return 0
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        bench.close()
