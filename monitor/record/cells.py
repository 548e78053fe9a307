"""Checked reading of a session file's cells: each value is of the kind its column holds,
or a :class:`~tankside.monitor.errors.SessionValueError` names the file, table, row and
column.

SQLite keeps whatever a cell was given, whatever its column's declared type, so a file
damaged on disk or edited by hand can hold text where a number belongs, a number where
a BLOB belongs, or JSON that does not parse. The reader takes every value through
:class:`Row`, so such a cell is reported where it is, never met later as a traceback.

Text is read with :func:`decode_text` (the connection's ``text_factory``), which never
fails; :meth:`Row.text` then refuses text that was not UTF-8 or that holds a NUL
character, which no column of a session file holds and HDF5 strings cannot carry.
"""

from __future__ import annotations

import json
import math
from typing import Any, NoReturn

import numpy as np

from ..errors import SessionValueError

__all__ = ["Row", "decode_text", "codes_dtype", "kind_of", "MAX_JSON_DEPTH"]

#: Deepest nesting of a JSON cell that is read (the store writes a few levels at most).
MAX_JSON_DEPTH = 64


def decode_text(data: bytes) -> str:
    """SQLite TEXT as a str; bytes that are not UTF-8 are kept as lone surrogates so
    that :meth:`Row.text` can name the cell instead of the driver failing mid-query."""
    return data.decode("utf-8", errors="surrogateescape")


def _text_problem(value: str) -> str | None:
    if "\x00" in value:
        return "text holds a NUL character"
    try:
        value.encode("utf-8")
    except UnicodeEncodeError:
        return "text is not valid UTF-8"
    return None


def _json_problem(value: Any) -> str | None:
    """Why a parsed JSON value cannot be used (too deep, a bad string), or None."""
    todo = [(value, 1)]
    while todo:
        v, depth = todo.pop()
        if depth > MAX_JSON_DEPTH:
            return f"JSON nested deeper than {MAX_JSON_DEPTH} levels"
        if isinstance(v, dict):
            for k, item in v.items():
                problem = _text_problem(k)
                if problem:
                    return f"a JSON key: {problem}"
                todo.append((item, depth + 1))
        elif isinstance(v, list):
            todo.extend((item, depth + 1) for item in v)
        elif isinstance(v, str):
            problem = _text_problem(v)
            if problem:
                return f"a JSON string: {problem}"
    return None


def _refuse_constant(token: str) -> NoReturn:
    # The store writes strict JSON (RFC 8259), which has no NaN or Infinity.
    raise ValueError(f"{token} is not strict JSON")


# strict JSON: the store writes no NaN or Infinity (json.loads would build one per call)
_DECODER = json.JSONDecoder(parse_constant=_refuse_constant)
_MISSING = object()


def kind_of(value: Any) -> str:
    """A cell's value in words, for messages (``text 'abc'``, ``a BLOB of 4 bytes``)."""
    if value is None:
        return "NULL"
    if isinstance(value, bytes):
        return f"a BLOB of {len(value)} bytes"
    if isinstance(value, str):
        shown = value if len(value) <= 40 else value[:37] + "..."
        return f"text {shown!r}"
    return f"{type(value).__name__} {value!r}"


def codes_dtype(text: str) -> np.dtype | None:
    """The numpy dtype of stored codes (``"<i2"``, ``"|i1"``, ``">f4"``...), or None when
    the text is not a plain integer or float dtype of at most 8 bytes."""
    try:
        dt = np.dtype(text)
    except (TypeError, ValueError, SyntaxError):
        return None
    if dt.kind not in "iuf" or dt.fields is not None or dt.shape != () or dt.itemsize > 8:
        return None
    return dt


class Row:
    """The cells of one row, read by column name with the kind each must be.

    Parameters
    ----------
    path : str
        The session file, for messages.
    table : str
        Its table.
    row : str
        Which row, in words (``"seq 12"``, ``"key 'settings'"``).
    values : dict
        Column name -> value as SQLite returned it.
    """

    def __init__(self, path: str, table: str, row: str, values: dict[str, Any]):
        self.path = path
        self.table = table
        self.row = row
        self.values = values

    def fail(self, column: str, problem: str) -> NoReturn:
        raise SessionValueError(self.path, self.table, self.row, column, problem)

    def _get(self, column: str) -> Any:
        if column not in self.values:
            self.fail(column, "the column is missing")
        return self.values[column]

    # -- numbers ------------------------------------------------------------------------
    def real(self, column: str) -> float:
        """A REAL (an INTEGER is taken as its float)."""
        v = self.values.get(column, _MISSING)
        if isinstance(v, float):
            return v
        if isinstance(v, int):
            return float(v)
        if v is _MISSING:
            self.fail(column, "the column is missing")
        self.fail(column, f"expected a number, found {kind_of(v)}")

    def real_or_nan(self, column: str) -> float:
        """A REAL, or NULL read as NaN (SQLite stores NaN as NULL)."""
        v = self._get(column)
        if v is None:
            return math.nan
        return v if isinstance(v, float) else self.real(column)

    def optional_real(self, column: str) -> float | None:
        return None if self._get(column) is None else self.real(column)

    def integer(self, column: str, *, minimum: int | None = None) -> int:
        v = self._get(column)
        if not isinstance(v, int):
            self.fail(column, f"expected an integer, found {kind_of(v)}")
        if minimum is not None and v < minimum:
            self.fail(column, f"expected an integer >= {minimum}, found {v}")
        return v

    def optional_integer(self, column: str) -> int | None:
        return None if self._get(column) is None else self.integer(column)

    def flag(self, column: str) -> bool:
        """A boolean stored as the integer 0 or 1."""
        v = self._get(column)
        if not (isinstance(v, int) and v in (0, 1)):
            self.fail(column, f"expected 0 or 1, found {kind_of(v)}")
        return bool(v)

    def optional_flag(self, column: str) -> bool | None:
        return None if self._get(column) is None else self.flag(column)

    # -- text and bytes -----------------------------------------------------------------
    def text(self, column: str) -> str:
        v = self._get(column)
        if not isinstance(v, str):
            self.fail(column, f"expected text, found {kind_of(v)}")
        problem = _text_problem(v)
        if problem:
            self.fail(column, problem)
        return v

    def optional_text(self, column: str) -> str | None:
        return None if self._get(column) is None else self.text(column)

    def blob(self, column: str) -> bytes:
        v = self._get(column)
        if not isinstance(v, bytes):
            self.fail(column, f"expected a BLOB, found {kind_of(v)}")
        return v

    # -- JSON ---------------------------------------------------------------------------
    def json(self, column: str, kind: type | None = None) -> Any:
        """A JSON text cell, parsed; ``kind`` (dict or list) is what its top level must be."""
        text = self.text(column)
        try:
            value = _DECODER.decode(text)
        except RecursionError:
            self.fail(column, f"JSON nested deeper than {MAX_JSON_DEPTH} levels")
        except ValueError as err:
            self.fail(column, f"not valid JSON ({err})")
        problem = _json_problem(value)
        if problem:
            self.fail(column, problem)
        if kind is not None and not isinstance(value, kind):
            want = ("a JSON object" if kind is dict else "a JSON list" if kind is list
                    else kind.__name__)
            self.fail(column, f"expected {want}, found {type(value).__name__}")
        return value
