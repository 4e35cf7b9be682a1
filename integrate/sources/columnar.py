"""Parquet files, read with pyarrow."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from integrate.errors import SourceError
from integrate.mapping.spec import ReadSpec
from integrate.sources.frame import SourceFile, text_frame


def read_parquet(path: Path, spec: ReadSpec, src: SourceFile) -> pd.DataFrame:
    """Read a Parquet file; struct columns become dotted names, ``_row`` is 1-based.

    Raises:
        SourceError: ``bad_file`` when the file is not Parquet.
    """
    try:
        table = pq.read_table(path)
    except (pa.ArrowInvalid, pa.ArrowIOError, OSError) as exc:
        raise SourceError(
            f"source '{src.name}' is not a readable Parquet file: {exc}",
            file=src.shown,
            reason="bad_file",
            hint="check `format` and `path` in the mapping's read section",
        ) from exc
    while any(pa.types.is_struct(field.type) for field in table.schema):
        table = table.flatten()  # {"name": {"first": ...}} -> "name.first"
    # timestamps keep their stored unit (no nanosecond overflow for old dates); dates as objects
    frame = table.to_pandas(date_as_object=True, coerce_temporal_nanoseconds=False)
    return text_frame(frame, np.arange(1, len(frame) + 1), src)
