"""Writing the trace files of a dashboard capture (the screenshot itself is Textual's)."""

from __future__ import annotations

from pathlib import Path

import numpy as np


def write_columns_csv(path: Path, header: tuple[str, str], x: np.ndarray, y: np.ndarray) -> Path:
    """Write two equal-length columns as CSV with a one-line header, e.g. ``time_s,voltage_v``.

    The ``time_s,voltage_v`` form is the one ``tankside convert`` reads, so a saved
    trace can be converted again offline.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if x.shape != y.shape:
        raise ValueError(f"columns differ in length: {x.shape} and {y.shape}")
    path = Path(path)
    with path.open("w", encoding="utf-8", newline="\n") as fh:
        fh.write(",".join(header) + "\n")
        np.savetxt(fh, np.column_stack((x, y)), delimiter=",", fmt="%.9e")
    return path
