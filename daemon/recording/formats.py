"""The export formats: what each holds and what it needs installed (the help of `poise export`).

Kept apart from export.py, which imports numpy, so that the command line can
list the formats without loading it.
"""

from __future__ import annotations

from typing import NamedTuple

PARQUET_EXTRA = "parquet"
PARQUET_INSTALL = f"pip install 'poise[{PARQUET_EXTRA}]'"


class ExportFormat(NamedTuple):
    holds: str
    needs: str
    """What must be installed besides Poise's own dependencies ("" for nothing)."""


FORMATS: dict[str, ExportFormat] = {
    "csv": ExportFormat("samples, with a mode_name column (events: use another format)", ""),
    "mat": ExportFormat("samples, events, mode table and run record (MATLAB, scipy.io)", ""),
    "npz": ExportFormat("samples, events, mode table and run record (numpy.load)", ""),
    "parquet": ExportFormat(
        "samples, with a mode_name column; events and run record in the file metadata",
        f"pyarrow, from the {PARQUET_EXTRA} extra: {PARQUET_INSTALL}",
    ),
}
