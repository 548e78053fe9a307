"""How ``watch`` and ``demo`` run a live session to its end (shared by both commands)."""

from __future__ import annotations

import signal
import sys
from collections.abc import Callable


def run_to_end(session, show: Callable[[], int], *, leftover_reason: str) -> int:
    """Run ``show()`` (start the session and display it; returns an exit code).

    SIGTERM stops the session cleanly (with the signal's name as the reason) while
    ``show`` runs; Ctrl-C stops it and waits for it. On the way out, a session still
    running is stopped with ``leftover_reason`` and waited for, and the session's
    message for the operator, if any, is printed on stderr. The wait has no time
    limit: the session commits what it holds before it ends.

    Returns
    -------
    int
        ``show()``'s code, or the session's exit code after Ctrl-C.
    """
    def on_term(signum, frame):
        session.stop(f"signal {signal.Signals(signum).name}")

    try:
        previous = signal.signal(signal.SIGTERM, on_term)
    except ValueError:          # not the main thread (embedded use): no handler to install
        previous = None
    try:
        code = show()
    except KeyboardInterrupt:
        session.stop("interrupted (Ctrl-C)")
        session.wait()
        code = session.exit_code
    finally:
        if session.running:
            session.stop(leftover_reason)
            session.wait()
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)
    if session.message_for_operator:
        print(f"tankside: {session.message_for_operator}", file=sys.stderr)
    return int(code)
