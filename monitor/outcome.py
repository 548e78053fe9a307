"""How a run ends: the exit status a session file records, and the process exit code.

Beside :mod:`tankside.monitor.errors` and below every layer: the live session records an
:class:`ExitStatus` and its process exits with that status's :class:`ExitCode`; the CLI
turns an error into an :class:`ExitCode`. Neither side imports the other for them.
"""

from __future__ import annotations

import enum


class ExitCode(enum.IntEnum):
    """Exit codes of the ``tankside`` command (the README's table lists the same)."""

    OK = 0
    """Success, or a session stopped as asked (duration, trace count, Ctrl-C, SIGTERM, ``q``)."""
    STOPPED_BY_RULE = 1
    """A session stopped by an alert rule whose action is ``stop``."""
    USAGE = 2
    """An expected failure: a bad input file or setting, an instrument not reachable."""
    INSTRUMENT = 3
    """A session that ended on an instrument failure it could not recover from."""
    STORE = 4
    """The session store could not be written (disk full, permissions); committed data intact."""
    INTERNAL = 5
    """A session ended by an internal error (a bug); committed data intact."""
    DRIVE_MAY_BE_ON = 6
    """The generator output could not be confirmed off: the drive may still be on."""
    INTERRUPTED = 130
    """A command interrupted by Ctrl-C (SIGINT) or SIGTERM before it finished;
    ``export``, ``replay`` and ``convert`` leave no partial output under the output's
    name. (A running session stopped by either signal ends as asked, with 0.) 130 is
    128 + SIGINT, as shells report a command ended by that signal (common practice);
    SIGTERM shares it, so that the status means one thing: not finished."""


class ExitStatus(enum.StrEnum):
    """How a session ended, as recorded in ``session_stop.exit_status``.

    Declared in order of :attr:`rank`: when several endings are reported for one
    session (a rule asks to stop, then the store fails), the worse one is recorded.
    """

    COMPLETED = "completed"
    """It ran to its end: its duration or trace count was reached."""
    OK = "ok"
    """A store closed after a replay, or by its ``with`` block, without an error."""
    OPERATOR = "operator"
    """The operator (or a signal, or the display closing) asked it to stop."""
    STOPPED_BY_RULE = "stopped-by-rule"
    """An alert rule whose action is ``stop`` fired."""
    INSTRUMENT_FAILURE = "instrument-failure"
    """An instrument was lost and could not be reconnected in time."""
    INTERNAL_ERROR = "internal-error"
    """A bug in a thread of the session (or its process died)."""
    ERROR = "error"
    """A store closed by its ``with`` block on an exception, or a replay that did not finish."""
    STORE_ERROR = "store-error"
    """The session store could not be written (disk full, I/O error)."""
    DRIVE_MAY_BE_ON = "drive-may-be-on"
    """A safe-off, or the switch-off at the end, could not be confirmed: the generator
    output may still be on (the worst ending: someone must act at the instrument)."""

    @property
    def rank(self) -> int:
        """Severity, 0 for the mildest; the status with the higher rank wins."""
        return tuple(ExitStatus).index(self)

    @property
    def exit_code(self) -> ExitCode:
        """The process exit code of a session that ended with this status."""
        return _EXIT_CODES[self]


_EXIT_CODES = {
    ExitStatus.COMPLETED: ExitCode.OK,
    ExitStatus.OK: ExitCode.OK,
    ExitStatus.OPERATOR: ExitCode.OK,
    ExitStatus.STOPPED_BY_RULE: ExitCode.STOPPED_BY_RULE,
    ExitStatus.INSTRUMENT_FAILURE: ExitCode.INSTRUMENT,
    ExitStatus.INTERNAL_ERROR: ExitCode.INTERNAL,
    ExitStatus.ERROR: ExitCode.INTERNAL,
    ExitStatus.STORE_ERROR: ExitCode.STORE,
    ExitStatus.DRIVE_MAY_BE_ON: ExitCode.DRIVE_MAY_BE_ON,
}
