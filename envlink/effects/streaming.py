"""Per-group summaries of raw records in Parquet files, streamed: DuckDB, or Dask on a cluster.

:func:`stream_summary` gives :func:`envlink.effects.group_effects` the same summary as
records in memory, without holding the records: per group the records counted and
left out, and the sums each kind needs (the 1s of an outcome; Pearson's r with the
two SDs' zero test; each arm's size, mean and sample SD), with groups in order of first
appearance (files in name order).

- DuckDB (when installed, the default): one SQL aggregate over ``read_parquet``,
  which streams row groups on all cores, with a memory limit and spilling to a
  temporary folder; its ``corr``, ``avg`` and ``stddev_samp`` are one-pass updates
  that stay exact for large offsets.
- Dask (with ``client=``, or when DuckDB is not installed): one task per row group,
  a shuffle that brings each group's records into one partition (on disk when they do
  not fit in memory), then the in-memory summary per partition.
- Neither: the needed columns are read into memory.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from envlink.effects.summaries import group_keys, summarise_records
from envlink.tables.numeric import parquet_files, parquet_pieces

__all__ = ["stream_summary", "summary_duckdb", "summary_dask", "DUCKDB_MEMORY"]

#: DuckDB's memory limit for a summary (it spills to a temporary folder beyond it)
DUCKDB_MEMORY = os.environ.get("ENVLINK_DUCKDB_MEMORY", "3GB")

Source = str | os.PathLike[str] | Sequence[str | os.PathLike[str]]


def _q(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'



def _sql(group: str, cols: list[str], kind_cols: tuple[str, ...], several_files: bool) -> str:
    """One aggregate over ``read_parquet($files)``: values that do not count become NULL first."""
    a = f"CAST({_q(cols[0])} AS DOUBLE)"
    if kind_cols == ("outcome",):
        values = (f"CASE WHEN isfinite({a}) THEN {a} END AS af, "
                  f"CASE WHEN {a} = 0 OR {a} = 1 THEN {a} END AS o")
        aggs = "count(o) AS n, sum(o) AS events, count(af) - count(o) AS non_binary"
    elif kind_cols == ("x", "y"):
        b = f"CAST({_q(cols[1])} AS DOUBLE)"
        ok = f"isfinite({a}) AND isfinite({b})"
        values = f"CASE WHEN {ok} THEN {a} END AS a, CASE WHEN {ok} THEN {b} END AS b"
        aggs = "count(a) AS n, corr(a, b) AS r"  # corr is NaN when a or b is constant
    else:
        values = ", ".join(f"CASE WHEN isfinite({a}) AND {_q(cols[1])} = $arm{i} THEN {a} END "
                           f"AS a{i}" for i in (1, 2))
        aggs = ", ".join(f"count(a{i}) AS n{i}, avg(a{i}) AS mean{i}, stddev_samp(a{i}) AS sd{i}"
                         for i in (1, 2))
    source = "read_parquet($files, file_row_number = true)"
    row = "file_row_number"
    if several_files:  # rows counted through the files, in name order
        source = ("read_parquet($files, filename = true, file_row_number = true) AS p "
                  "JOIN files ON p.filename = files.fname")
        row = "files.base + file_row_number"
    # blank text names no group: it joins the missing ones (envlink.effects.summaries.group_keys)
    g = f"CASE WHEN regexp_full_match(CAST({_q(group)} AS VARCHAR), '\\s*') THEN NULL ELSE {_q(group)} END"
    return (f"WITH t AS (SELECT {g} AS g, {values}, {row} AS row FROM {source}) "
            f"SELECT g, min(row) AS first, count(*) AS records, {aggs} "
            "FROM t GROUP BY g ORDER BY first")


def summary_duckdb(source: Source, group: str, cols: list[str], kind_cols: tuple[str, ...],
                   arms: tuple[Any, Any] | None) -> tuple[pd.Index, dict[str, np.ndarray]]:
    """The per-group summary by one DuckDB aggregate over the Parquet files."""
    import duckdb

    numeric = cols if kind_cols != ("value", "arm") else cols[:1]
    pieces = parquet_pieces(source, [group, *cols], numeric=numeric, what="group_effects")
    files = parquet_files(source)
    rows = {f: 0 for f in files}
    for f, _, n in pieces:
        rows[f] += n
    base = np.concatenate([[0], np.cumsum(list(rows.values()))[:-1]]).astype(np.int64)
    params: dict[str, Any] = {"files": files}
    if arms is not None:
        params.update(arm1=arms[0], arm2=arms[1])
    with tempfile.TemporaryDirectory(prefix="envlink-duckdb-") as tmp:
        con = duckdb.connect(config={"memory_limit": DUCKDB_MEMORY, "temp_directory": tmp})
        try:
            con.register("files", pd.DataFrame({"fname": files, "base": base}))
            sql = _sql(group, cols, kind_cols, len(files) > 1)
            table = con.sql(sql, params=params).to_arrow_table()
        finally:
            con.close()
    keys = pd.Index(table.column("g").to_pandas())
    s = {c: table.column(c).to_numpy(zero_copy_only=False) for c in table.column_names
         if c not in ("g", "first")}
    return keys, _tidy(s, kind_cols)


def _tidy(s: dict[str, Any], kind_cols: tuple[str, ...]) -> dict[str, np.ndarray]:
    """Counts as int64, missing aggregates as NaN, the summary keys of the in-memory path."""
    out: dict[str, np.ndarray] = {}
    for c, a in s.items():
        a = np.asarray(a)
        out[c] = (np.nan_to_num(a.astype(np.float64), nan=0).astype(np.int64)
                  if c in ("records", "n", "n1", "n2", "events", "non_binary")
                  else np.asarray(pd.to_numeric(a), dtype=np.float64))
    if kind_cols == ("value", "arm"):
        out["n"] = out["n1"] + out["n2"]
    out["n_excluded"] = out.pop("records") - out["n"]
    if kind_cols == ("x", "y"):
        out["constant"] = np.isnan(out["r"]) & (out["n"] >= 2)
        out["r"] = np.clip(out["r"], -1.0, 1.0)
    return out


def _read_piece(piece: tuple[str, int, int], columns: list[str], offset: int) -> pd.DataFrame:
    import pyarrow.parquet as pq

    df = pq.ParquetFile(piece[0]).read_row_group(piece[1], columns=columns).to_pandas()
    df[columns[0]] = group_keys(df, columns[0])  # blank groups meet the missing ones in one partition
    df["_row"] = np.arange(offset, offset + len(df), dtype=np.int64)
    return df


def _partition_summary(df: pd.DataFrame, group: str, cols: list[str],
                       kind_cols: tuple[str, ...], arms: tuple[Any, Any] | None) -> pd.DataFrame:
    keys, s = summarise_records(df, group, cols, kind_cols, arms)
    codes, _ = pd.factorize(df[group], use_na_sentinel=False)
    first = pd.Series(df["_row"].to_numpy()).groupby(codes, sort=True).min().to_numpy()
    return pd.DataFrame({"_key": keys, "_first": first, **s})


def summary_dask(source: Source, group: str, cols: list[str], kind_cols: tuple[str, ...],
                 arms: tuple[Any, Any] | None, client: Any = None
                 ) -> tuple[pd.Index, dict[str, np.ndarray]]:
    """The per-group summary on Dask: a task per row group, a shuffle by group, a summary per partition."""
    import dask
    import dask.dataframe as dd
    import pyarrow.parquet as pq

    from envlink.core.cluster import on_cluster

    numeric = cols if kind_cols != ("value", "arm") else cols[:1]
    columns = list(dict.fromkeys([group, *cols]))
    pieces = parquet_pieces(source, columns, numeric=numeric, what="group_effects")
    offsets = np.concatenate([[0], np.cumsum([p[2] for p in pieces])]).astype(int)
    meta = pq.read_schema(pieces[0][0]).empty_table().select(columns).to_pandas()
    meta["_row"] = np.zeros(0, dtype=np.int64)
    with on_cluster(client):
        parts = [dask.delayed(_read_piece)(p, columns, int(o)) for p, o in zip(pieces, offsets,
                                                                              strict=False)]
        ddf = dd.from_delayed(parts, meta=meta, verify_meta=False).shuffle(on=group)
        sample = _partition_summary(meta, group, cols, kind_cols, arms)
        out = ddf.map_partitions(_partition_summary, group, cols, kind_cols, arms,
                                 meta=sample).compute()
    out = out.sort_values("_first", kind="stable")
    keys = pd.Index(out["_key"].to_numpy(), dtype=meta[group].dtype)
    return keys, {c: out[c].to_numpy() for c in out.columns if c not in ("_key", "_first")}


def stream_summary(source: Source, group: str, cols: list[str], kind_cols: tuple[str, ...],
                   arms: tuple[Any, Any] | None, *, client: Any = None
                   ) -> tuple[pd.Index, dict[str, np.ndarray]]:
    """The per-group summary of Parquet records by the engine the module docstring describes."""
    import importlib.util

    if client is not None:
        return summary_dask(source, group, cols, kind_cols, arms, client)
    if importlib.util.find_spec("duckdb") is not None:
        return summary_duckdb(source, group, cols, kind_cols, arms)
    if importlib.util.find_spec("dask") is not None:
        return summary_dask(source, group, cols, kind_cols, arms)
    files = parquet_files(source)
    import pyarrow.parquet as pq

    table = pd.concat([pq.read_table(f, columns=list(dict.fromkeys([group, *cols]))).to_pandas()
                       for f in files], ignore_index=True)
    return summarise_records(table, group, cols, kind_cols, arms)
