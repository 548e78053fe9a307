"""HDF5 datasets as the exports write them: h5py imported where needed, text as UTF-8
strings, numbers with a ``units`` attribute (plain types any HDF5 tool reads)."""

from __future__ import annotations

import numpy as np

from ..errors import ConfigError
from .schema import units_of

__all__ = ["h5py_module", "string_dataset", "number_dataset"]


def h5py_module():
    """The h5py module; ConfigError when it is not installed."""
    try:
        import h5py  # type: ignore[import-untyped]  # h5py ships no type information
    except ImportError as err:  # pragma: no cover - h5py is a dependency
        raise ConfigError("HDF5 export needs h5py (pip install h5py)") from err
    return h5py


def string_dataset(group, name: str, values):
    """A 1-D dataset of variable-length UTF-8 strings."""
    return group.create_dataset(name, data=np.array(list(values), dtype=object),
                                dtype=h5py_module().string_dtype())


def number_dataset(group, name: str, values, dtype, units: str | None = None):
    """A 1-D dataset of ``dtype`` with the attribute ``units`` (from the name's suffix
    when not given)."""
    ds = group.create_dataset(name, data=np.array(list(values), dtype=dtype))
    ds.attrs["units"] = units_of(name) if units is None else units
    return ds
