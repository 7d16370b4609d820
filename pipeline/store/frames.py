"""Query results as polars DataFrames (polars loads on the first call, not on import)."""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import duckdb
    import polars as pl


def to_frame(result: duckdb.DuckDBPyRelation | None) -> pl.DataFrame:
    """A query result as a polars DataFrame (through Arrow, no copy of the columns)."""
    import polars as pl

    if result is None:  # a statement with no result set
        return pl.DataFrame()
    frame = pl.from_arrow(result.to_arrow_table())
    assert isinstance(frame, pl.DataFrame)
    return frame
