"""IEEE 488.2 reply parsing as pure functions: block headers, numbers, booleans, errors.

Nothing here does I/O. Every malformed input raises
:class:`tankside.drivers.errors.ProtocolError` with a message that says what was
expected and what arrived.

References
----------
IEEE Std 488.2-1992, clause 8.7.9 (definite-length arbitrary block response data),
clause 8.7.10 (indefinite-length form, ``#0``), clause 8.7.2-8.7.4 (NR1/NR2/NR3 numbers).
SCPI-1999 Volume 1, clause 21.8 (``SYSTem:ERRor?`` reply ``<code>,"<text>"``).
"""

from __future__ import annotations

import math
import re

from .errors import ProtocolError

#: Longest payload length a header may announce (9 digits) - IEEE 488.2 8.7.9.
MAX_HEADER_DIGITS = 9

# SCPI-1999 Vol. 1, 7.2.1.5: 9.91E37 is sent for "not a number".
_SCPI_NAN = 9.91e37

_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")
_ERROR = re.compile(r'\s*([+-]?\d+)\s*,\s*"((?:[^"]|"")*)"\s*')


def _show(data: bytes | bytearray, limit: int = 24) -> str:
    text = repr(bytes(data[:limit]))
    return text + ("..." if len(data) > limit else "")


def header_digit_count(prefix: bytes | bytearray) -> int:
    """Number of length digits announced by the first two bytes of a block, ``#<n>``.

    Parameters
    ----------
    prefix : bytes
        The first two bytes of the reply.

    Returns
    -------
    int
        ``n``, 1 to 9.

    Raises
    ------
    ProtocolError
        If the bytes are not ``#`` and a digit 1-9. The indefinite-length form ``#0``
        is rejected: its end is marked only by the message terminator, which a binary
        payload may contain, so over a socket it cannot be read reliably.
    """
    if len(prefix) < 2:
        raise ProtocolError(f"block header too short: {_show(prefix)}, expected '#<n>'")
    if prefix[0:1] != b"#":
        raise ProtocolError(f"expected a block starting with '#', got {_show(prefix)}")
    digit = prefix[1:2]
    if digit == b"0":
        raise ProtocolError("indefinite-length block ('#0') is not supported; "
                            "configure the instrument for definite-length blocks")
    if not (b"1" <= digit <= b"9"):
        raise ProtocolError(f"expected a digit 1-9 after '#', got {_show(prefix)}")
    return int(digit)


def payload_length(digits: bytes | bytearray, n_digits: int) -> int:
    """Payload byte count from the ``<len>`` digits of a block header.

    Raises
    ------
    ProtocolError
        If ``digits`` is not exactly ``n_digits`` ASCII decimal digits.
    """
    if len(digits) != n_digits or not all(48 <= b <= 57 for b in digits):
        raise ProtocolError(f"expected {n_digits} length digits in block header, "
                            f"got {_show(digits)}")
    return int(digits)


def parse_block_header(data: bytes) -> tuple[int, int]:
    """Parse the header at the start of ``data``.

    Returns
    -------
    header_bytes : int
        Length of the header, ``2 + n``.
    payload_bytes : int
        The announced payload length.
    """
    n = header_digit_count(bytes(data[:2]))
    return 2 + n, payload_length(bytes(data[2:2 + n]), n)


def encode_block(payload: bytes) -> bytes:
    """The definite-length block ``#<n><len><payload>`` for ``payload``."""
    length = str(len(payload)).encode("ascii")
    if len(length) > MAX_HEADER_DIGITS:
        raise ValueError("payload longer than a 9-digit block header can announce")
    return b"#" + str(len(length)).encode("ascii") + length + bytes(payload)


def split_block(data: bytes, terminator: bytes = b"") -> tuple[bytes, bytes]:
    """Split one complete block reply (for replies already read in full).

    Parameters
    ----------
    data : bytes
        The reply, starting at ``#``.
    terminator : bytes
        The message terminator expected right after the payload (``b""`` for none).

    Returns
    -------
    payload, rest : bytes
        The payload and whatever follows the terminator.

    Raises
    ------
    ProtocolError
        Malformed header, payload shorter than announced, or a missing terminator.
    """
    head, count = parse_block_header(data)
    end = head + count
    if len(data) < end:
        raise ProtocolError(f"short block: header announced {count} bytes, "
                            f"{len(data) - head} arrived")
    tail = data[end:end + len(terminator)]
    if tail != terminator:
        raise ProtocolError(f"expected terminator {terminator!r} after block, got {_show(tail)}")
    return bytes(data[head:end]), bytes(data[end + len(terminator):])


def parse_number(reply: str) -> float:
    """A decimal number reply (NR1, NR2 or NR3) as a float.

    Raises
    ------
    ProtocolError
        If the reply is not one number, or is the SCPI not-a-number value 9.91E37,
        or is infinite.
    """
    text = reply.strip()
    if not _NUMBER.fullmatch(text):
        raise ProtocolError(f"expected a number, got {reply!r}")
    value = float(text)
    if not math.isfinite(value) or abs(value) == _SCPI_NAN:
        raise ProtocolError(f"instrument sent a non-finite value {reply!r}")
    return value


def parse_int(reply: str) -> int:
    """An integer reply (NR1, or NR2/NR3 with an integral value)."""
    value = parse_number(reply)
    if value != int(value):
        raise ProtocolError(f"expected an integer, got {reply!r}")
    return int(value)


def parse_bool(reply: str, *, true_replies=("1", "ON"), false_replies=("0", "OFF")) -> bool:
    """A boolean reply; the accepted words are compared case-insensitively.

    Raises
    ------
    ProtocolError
        If the reply is in neither list.
    """
    text = reply.strip().upper()
    if text in (t.upper() for t in true_replies):
        return True
    if text in (f.upper() for f in false_replies):
        return False
    raise ProtocolError(f"expected one of {list(true_replies) + list(false_replies)}, "
                        f"got {reply!r}")


def parse_error_reply(reply: str) -> tuple[int, str]:
    """A ``SYSTem:ERRor?`` reply such as ``-113,"Undefined header"`` as (code, text).

    Code 0 means the queue is empty. Doubled quotes inside the text are undone.
    """
    match = _ERROR.fullmatch(reply)
    if not match:
        raise ProtocolError(f'expected an error-queue reply <code>,"<text>", got {reply!r}')
    return int(match.group(1)), match.group(2).replace('""', '"')
