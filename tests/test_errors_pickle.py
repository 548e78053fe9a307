"""Every typed error survives a pickle round trip with all its fields.

A live session in a child process sends its errors to the dashboard's process as they
are, so each error class must rebuild itself from its pickle. The classes are found by
walking the subclasses of the two bases once every module of the package is imported,
and each is built from its own constructor's signature: a new class whose constructor
takes more than the message fails here until it defines ``__reduce__``.
"""

from __future__ import annotations

import importlib
import inspect
import pickle
import pkgutil
import typing

import pytest

import tankside.drivers
import tankside.monitor
from tankside.drivers.errors import InstrumentError, InstrumentReportedError
from tankside.monitor.errors import TanksideError

for _package in (tankside.monitor, tankside.drivers):
    for _module in pkgutil.walk_packages(_package.__path__, f"{_package.__name__}."):
        importlib.import_module(_module.name)


def _subclasses(base: type) -> list[type]:
    found, todo = [], [base]
    while todo:
        cls = todo.pop()
        found.append(cls)
        todo.extend(cls.__subclasses__())
    return sorted(set(found), key=lambda c: f"{c.__module__}.{c.__qualname__}")


ERROR_CLASSES = _subclasses(TanksideError) + _subclasses(InstrumentError)


def _sample(name: str, annotation, n: int):
    """A value for a parameter, distinct for each (so a swapped field shows)."""
    options = typing.get_args(annotation) or (annotation,)
    if int in options:
        return -100 - n
    if str in options:
        return f"{name} {n}"
    raise TypeError(f"no sample value for {name}: {annotation!r}")


def build(cls: type) -> BaseException:
    """An instance with a distinct value in every constructor parameter."""
    if cls.__init__ is Exception.__init__:            # the message alone
        return cls(f"{cls.__name__} message")
    hints = typing.get_type_hints(cls.__init__)
    args, kwargs = [], {}
    params = list(inspect.signature(cls.__init__).parameters.values())[1:]
    for n, p in enumerate(params):
        value = _sample(p.name, hints[p.name], n)
        if p.kind is p.KEYWORD_ONLY:
            kwargs[p.name] = value
        else:
            args.append(value)
    return cls(*args, **kwargs)


def test_the_walk_finds_the_errors_of_every_layer():
    names = {cls.__name__ for cls in ERROR_CLASSES}
    assert {"CalibrationError", "DiskFullError", "UnusableTraceError",
            "InstrumentReportedError", "NoTrigger", "SettingError"} <= names


@pytest.mark.parametrize("cls", ERROR_CLASSES, ids=lambda c: c.__name__)
def test_round_trip_keeps_type_text_and_every_field(cls):
    err = build(cls)
    err.note = "set after construction"
    back = pickle.loads(pickle.dumps(err))
    assert type(back) is cls
    assert str(back) == str(err)
    assert back.args == err.args
    assert vars(back) == vars(err)


def test_an_instrument_error_code_crosses():
    # the case that used to fail: -113 came back as a constructor call with one argument
    err = InstrumentReportedError(-113, "Undefined header", command="VOLT:FOO 1",
                                  resource="TCPIP0::127.0.0.1::5025::SOCKET")
    back = pickle.loads(pickle.dumps(err))
    assert (back.code, back.description, back.command, back.resource) == (
        -113, "Undefined header", "VOLT:FOO 1", "TCPIP0::127.0.0.1::5025::SOCKET")
    assert str(back) == str(err)
