"""Atomic writers: Parquet in row groups reads back as the same table."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd

from aspectus.atomic import write_parquet


def test_parquet_written_in_row_groups_reads_back_equal(tmp_path):
    # the reader is pyarrow/pandas (the reference library); chunked writing must not change the table
    import pyarrow.parquet as pq

    n = 40_000
    df = pd.DataFrame({"t_s": np.arange(n) / 30.0, "valid": np.arange(n) % 3 == 0, "frame_index": np.arange(n),
                       "yaw_deg": np.where(np.arange(n) % 7 == 0, np.nan, np.sin(np.arange(n)))})
    write_parquet(tmp_path / "s.parquet", df, metadata={"input_sha256": "ab"}, chunk_rows=16384)
    f = pq.ParquetFile(tmp_path / "s.parquet")
    assert f.num_row_groups == 3
    assert json.loads(f.schema_arrow.metadata[b"aspectus"]) == {"input_sha256": "ab"}
    pd.testing.assert_frame_equal(pd.read_parquet(tmp_path / "s.parquet"), df)
    write_parquet(tmp_path / "empty.parquet", df.iloc[:0])
    assert len(pd.read_parquet(tmp_path / "empty.parquet")) == 0
