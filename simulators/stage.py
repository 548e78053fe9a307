"""A simulated three-axis positioning stage on a pty, in a dialect of our own (invented).

Commands end with CR and each gets one reply line ending with CR (profile:
``simulators/profiles/sim-stage.toml``). Axes are addressed ``X``, ``Y``, ``Z``;
positions are counts of 1 um.

    WHO?               -> "SIMSTAGE-3 tankside simulated stage"
    <A> GO <counts>    -> "OK", or "ERR 3 beyond travel" (nothing moves)
    <A> BY <counts>    -> "OK" / "ERR 3 beyond travel"
    <A> AT?            -> "<counts>"
    <A> BUSY?          -> "1" while the axis moves, else "0"
    <A> HOME           -> "OK" (moves to 0)
    <A> SPEED <c/s>    -> "OK" / "ERR 4 speed out of range"
    HALT               -> "OK" (every axis stops where it is)
    anything else      -> "ERR 1 unknown command"

After a stall (:meth:`SimulatedStage.stall_next_move`) the axis stops part way and its
next command is answered "ERR 7 axis <A> stalled" once.

Moves take real time: a trapezoidal profile with the axis' speed and acceleration.
Given the bench's :class:`~tankside.simulators.scene.Scene`, the stage moves the
hydrophone there as it moves (stage mm minus ``focus_mm``, in m), so the simulated
digitiser's traces follow it.
"""

from __future__ import annotations

import math
import re
import time
from dataclasses import dataclass

from .pty_device import PtyLineDevice
from .scene import Scene

__all__ = ["SimulatedStage", "COUNTS_PER_MM", "AXES"]

COUNTS_PER_MM = 1000
AXES = ("X", "Y", "Z")
# travel of each axis, counts (invented: 100 mm across, 150 mm deep)
TRAVEL = {"X": (-50_000, 50_000), "Y": (-50_000, 50_000), "Z": (-75_000, 75_000)}
SPEED_RANGE = (10, 200_000)         # counts/s allowed by SPEED
_COMMAND = re.compile(r"^(?P<axis>[A-Z])\s+(?P<verb>GO|BY|AT\?|BUSY\?|HOME|SPEED)"
                      r"(?:\s+(?P<arg>[-+]?\d+))?$")


def travelled(distance: float, speed: float, accel: float, t: float) -> float:
    """Distance covered ``t`` s into a trapezoidal move of ``distance`` (> 0) at top
    ``speed`` and ``accel`` (triangular when too short to reach the speed)."""
    if t <= 0:
        return 0.0
    t_acc = speed / accel
    d_acc = 0.5 * accel * t_acc * t_acc
    if distance < 2 * d_acc:                  # never reaches top speed
        t_half = math.sqrt(distance / accel)
        if t < t_half:
            return 0.5 * accel * t * t
        if t < 2 * t_half:
            return distance - 0.5 * accel * (2 * t_half - t) ** 2
        return distance
    t_flat = (distance - 2 * d_acc) / speed
    if t < t_acc:
        return 0.5 * accel * t * t
    if t < t_acc + t_flat:
        return d_acc + speed * (t - t_acc)
    if t < 2 * t_acc + t_flat:
        return distance - 0.5 * accel * (2 * t_acc + t_flat - t) ** 2
    return distance


@dataclass
class _Axis:
    position: float = 0.0              # counts, where the axis was when the move began
    target: float = 0.0
    started: float = 0.0
    speed: float = 20_000.0            # counts/s (20 mm/s)
    accel: float = 200_000.0           # counts/s^2
    stop_at: float | None = None       # a stall: the fraction of the move it reaches
    stalled: bool = False

    def now(self, t: float) -> float:
        d = self.target - self.position
        if d == 0:
            return self.position
        s = travelled(abs(d), self.speed, self.accel, t - self.started)
        if self.stop_at is not None:
            s = min(s, self.stop_at * abs(d))
        return self.position + math.copysign(s, d)

    def moving(self, t: float) -> bool:
        d = self.target - self.position
        if d == 0:
            return False
        reach = abs(d) if self.stop_at is None else self.stop_at * abs(d)
        return travelled(abs(d), self.speed, self.accel, t - self.started) < reach

    def settle(self, t: float) -> None:
        """Make where the axis is now its resting point (a halt, or a new move)."""
        here = self.now(t)
        if self.stop_at is not None and not self.moving(t) and self.target != self.position:
            self.stalled = True
        self.position = self.target = here
        self.stop_at = None
        self.started = t


class SimulatedStage(PtyLineDevice):
    """The simulated stage; ``device_path`` is the serial port to open.

    Parameters
    ----------
    scene : Scene, optional
        Moved with the stage.
    focus_mm : tuple
        Stage coordinates (mm) of the scene's focus.
    start_mm : tuple
        Where the axes are at power-on (mm).
    clock : callable
        Seconds, monotonic (tests may pass a fake).
    """

    def __init__(self, scene: Scene | None = None, *,
                 focus_mm: tuple[float, float, float] = (0.0, 0.0, 0.0),
                 start_mm: tuple[float, float, float] = (0.0, 0.0, 0.0), clock=time.monotonic):
        self.scene = scene
        self.focus_mm = focus_mm
        self.clock = clock
        self.axes = {}
        for name, mm in zip(AXES, start_mm, strict=True):
            counts = float(round(mm * COUNTS_PER_MM))
            low, high = TRAVEL[name]
            if not low <= counts <= high:
                raise ValueError(f"start position {mm:g} mm of axis {name} is beyond its "
                                 "travel")
            self.axes[name] = _Axis(position=counts, target=counts)
        self._stall: tuple[str, float] | None = None
        self._last_scene: tuple[float, ...] | None = None
        super().__init__(terminator="\r", name="stage")
        self._update_scene()

    # ------------------------------------------------------------ for tests
    def position_mm(self) -> dict[str, float]:
        t = self.clock()
        with self._lock:
            return {name.lower(): ax.now(t) / COUNTS_PER_MM for name, ax in self.axes.items()}

    def stall_next_move(self, axis: str = "X", fraction: float = 0.5) -> None:
        """The next move of ``axis`` stops at ``fraction`` of its travel."""
        self._stall = (axis.upper(), fraction)

    # ------------------------------------------------------------ the dialect
    def handle(self, line: str) -> str | None:
        t = self.clock()
        if line == "WHO?":
            return "SIMSTAGE-3 tankside simulated stage"
        if line == "HALT":
            for ax in self.axes.values():
                ax.settle(t)
            self._update_scene()
            return "OK"
        m = _COMMAND.match(line)
        if m is None or m.group("axis") not in self.axes:
            return "ERR 1 unknown command"
        name, verb, arg = m.group("axis"), m.group("verb"), m.group("arg")
        ax = self.axes[name]
        if ax.stalled:
            ax.stalled = False
            return f"ERR 7 axis {name} stalled"
        if verb in ("AT?", "BUSY?", "HOME") and arg is not None:
            return "ERR 2 unexpected argument"
        if verb in ("GO", "BY", "SPEED") and arg is None:
            return "ERR 2 missing argument"
        if verb == "AT?":
            return str(round(ax.now(t)))
        if verb == "BUSY?":
            return "1" if ax.moving(t) else "0"
        if verb == "SPEED":
            value = int(arg)
            if not SPEED_RANGE[0] <= value <= SPEED_RANGE[1]:
                return "ERR 4 speed out of range"
            ax.settle(t)
            ax.speed = float(value)
            return "OK"
        here = ax.now(t)
        target = 0.0 if verb == "HOME" else float(int(arg)) + (here if verb == "BY" else 0.0)
        low, high = TRAVEL[name]
        if not low <= target <= high:
            return "ERR 3 beyond travel"
        ax.settle(t)
        ax.target = target
        if self._stall is not None and self._stall[0] == name:
            ax.stop_at = self._stall[1]
            self._stall = None
        return "OK"

    def tick(self) -> None:
        t = self.clock()
        for ax in self.axes.values():
            if ax.stop_at is not None and not ax.moving(t):
                ax.settle(t)          # a stall reached: latched for the next command
        self._update_scene()

    def _update_scene(self) -> None:
        if self.scene is None:
            return
        t = self.clock()
        mm = tuple(self.axes[n].now(t) / COUNTS_PER_MM - f
                   for n, f in zip(AXES, self.focus_mm, strict=True))
        if mm != self._last_scene:
            self._last_scene = mm
            self.scene.set_position_m(*(v / 1000.0 for v in mm))
