"""Typed errors for expected failures.

Every failure a user can cause or meet in normal work (a bad file, a full disk, a
lost instrument) is one of these or a :class:`tankside.drivers.errors.InstrumentError`.
The CLI turns them into a one-line message and an exit code; nothing else reaches a
user as a traceback. Each pickles with all its fields (a live session in a child
process sends them to the dashboard's process): an error whose constructor takes more
than the message defines ``__reduce__`` returning its class and constructor arguments
(and its attributes, as the default does, for any set after construction).
"""


class TanksideError(Exception):
    """Base class of tankside's expected failures (not instrument I/O)."""


class CalibrationError(TanksideError):
    """A hydrophone calibration file that cannot be used.

    Parameters
    ----------
    source : str
        The file name (or a label for in-memory text).
    line : int or None
        1-based line number in the file, or None when the problem is not on one line.
    problem : str
        What is wrong, in words that say what was expected.
    """

    def __init__(self, source: str, line: int | None, problem: str):
        self.source = source
        self.line = line
        self.problem = problem
        where = f"{source}, line {line}" if line is not None else source
        super().__init__(f"{where}: {problem}")

    def __reduce__(self):
        return type(self), (self.source, self.line, self.problem), vars(self)


class TraceFileError(TanksideError):
    """A voltage trace file (CSV ``time_s,voltage_v``) that cannot be used."""


class OutOfBandError(TanksideError):
    """The acoustic working frequency lies outside the calibrated band."""


class ConfigError(TanksideError):
    """A bench file, profile choice or command-line setting that cannot be used."""

    key: str | None = None
    """The setting at fault (``"clipping.min_samples"``), where the raiser names one."""


class ScanDataError(ConfigError):
    """Scan points or beam-figure settings that cannot be used: coordinate and value
    arrays of different lengths, a coordinate that is not finite, readings of one
    coordinate spread wider than the gridding tolerance (points not on a grid), more than
    three scanned axes, an unknown beam axis, a source distance that puts a point behind
    the source face.

    A scan that is only partly done is not an error: its figures say what is missing.
    """


class OutsideLimitsError(TanksideError):
    """A stage move outside the bench file's soft limits (``[stage.limits]``), or to an
    axis without limits; refused before anything is sent to the stage."""


class ScanPlanError(ConfigError):
    """A scan plan that cannot be used: its TOML file or the bench file's ``[scan]`` table,
    or its CSV of points. The message names the file and the key, point or line."""


class PlanOutsideLimitsError(ScanPlanError, OutsideLimitsError):
    """A point of a scan plan outside the bench file's soft limits (``[stage.limits]``),
    or on an axis the stage has no limits for; the plan is refused when it is loaded,
    with the point named."""


class StoreError(TanksideError):
    """The session store cannot be written or read."""


class DiskFullError(StoreError):
    """The session store ran out of space; data committed before this is intact."""


class SessionFileError(TanksideError):
    """A session file that cannot be read as asked: missing, not a tankside session,
    newer than this tankside, or without the trace asked for (an input problem, not a
    failure to write)."""


class InstrumentBusy(TanksideError):
    """Another tankside session holds the instrument; its holder is in the message."""
class SessionValueError(SessionFileError):
    """A value in a session file that is not what its column holds (bad JSON, text where a
    number belongs, a sample count that does not match the codes, ...).

    Parameters
    ----------
    path : str
        The session file.
    table : str
        The table (``"traces"``, ``"metadata"``, ...).
    row : str
        Which row: ``"seq 12"``, ``"key 'settings'"``, ``"event_id 3"``, ``"the row"``.
    column : str
        The column (``"state_json"``, ``"n"``, ...).
    problem : str
        What is wrong, in words that say what was expected.
    """

    def __init__(self, path: str, table: str, row: str, column: str, problem: str):
        self.path = path
        self.table = table
        self.row = row
        self.column = column
        self.problem = problem
        super().__init__(f"{path}: table {table}, {row}, column {column}: {problem}")

    def __reduce__(self):
        return type(self), (self.path, self.table, self.row, self.column, self.problem), \
            vars(self)


class TraceChecksumError(SessionValueError):
    """A stored trace whose codes do not match the checksum recorded with them: the file
    was damaged after it was written (a flipped bit on the disk or in a copy)."""


class OutputFileError(TanksideError):
    """An output file (an export, replay's new session) that cannot be written: a missing
    folder, no permission, a full disk. Nothing is left under the file's name."""
