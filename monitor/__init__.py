"""tankside.monitor: numerics, live pipeline, session store, alerts, dashboard and CLI."""

from importlib import metadata as _metadata

try:
    __version__ = _metadata.version("tankside")
except _metadata.PackageNotFoundError:  # running from a source tree without install
    __version__ = "0+unknown"
