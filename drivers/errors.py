"""Typed instrument errors, chained from pyvisa's (``raise ... from err``).

Each pickles with all its fields: ``__reduce__`` returns the class (with its keyword
arguments bound) and the constructor's positional arguments, so that unpickling builds
the same error rather than calling the constructor with the message alone (attributes
set after construction come along, as with the default).
"""

import functools


class InstrumentError(Exception):
    """Base class of every instrument I/O failure.

    Parameters
    ----------
    message : str
        What went wrong, in words for the operator.
    resource : str, optional
        The VISA resource string of the instrument, when known.
    """

    def __init__(self, message: str, *, resource: str | None = None):
        self.resource = resource
        self.message = message
        super().__init__(f"{resource}: {message}" if resource else message)

    def __reduce__(self):
        return (functools.partial(type(self), resource=self.resource), (self.message,),
                vars(self))


class InstrumentTimeout(InstrumentError):
    """No (complete) reply within the timeout; the stream may be out of step."""


class ConnectionLost(InstrumentError):
    """The transport closed or could not be opened."""


class ProtocolError(InstrumentError):
    """A reply that does not parse: bad block header, short block, garbled number."""


class InstrumentReportedError(InstrumentError):
    """An error the instrument put in its SCPI error queue.

    Attributes
    ----------
    code : int
        The SCPI error number (e.g. -113 undefined header).
    description : str
        The instrument's text for it.
    command : str or None
        The command after which the error was read, when known.
    """

    def __init__(self, code: int, description: str, *, command: str | None = None,
                 resource: str | None = None):
        self.code = code
        self.description = description
        self.command = command
        after = f" after {command!r}" if command else ""
        super().__init__(f"instrument error {code}, {description!r}{after}", resource=resource)

    def __reduce__(self):
        return (functools.partial(type(self), command=self.command, resource=self.resource),
                (self.code, self.description), vars(self))


class NoTrigger(InstrumentTimeout):
    """The digitiser was armed but did not trigger within the allowed time."""


class ProfileError(InstrumentError):
    """An instrument profile (TOML) that is missing a key or has a bad value.

    The message names the file and the key.
    """


class SettingError(InstrumentError, ValueError):
    """A requested setting the instrument's profile does not allow (e.g. a range not
    in ``[ranges] values_v``), or an operation its profile does not define."""


class LimitError(SettingError):
    """A stage move that would leave the soft limits (the travel in which the hydrophone
    cannot hit the transducer or the tank wall); refused before anything is sent."""
