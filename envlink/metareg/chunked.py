"""Meta-regression over data that live in pieces: a Parquet dataset or a Zarr store, on Dask.

Every estimator reads the data through one-pass weighted sums
(:func:`~envlink.metareg._kernels.weighted_sums_multi`). Over Dask arrays each pass
is one task per chunk (:func:`~envlink.metareg._kernels.block_sums_multi` on that
chunk, where the chunk lives) and the chunk results are added in chunk order on the
caller's side, so the answer equals the single-machine one up to the rounding of
that final addition. With a ``dask.distributed`` client the tasks run on its
workers; with ``persist=True`` the columns are read once into the workers' memory,
otherwise every pass reads them from storage again (data larger than the cluster's
memory).

:func:`design_from_source` makes the design (rows chosen by the model frame's rules:
rows with a missing or non-finite value are left out and reported, a non-positive
variance is an error naming the row); :func:`fit_on_cluster` fits it on a client.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import numpy as np

from envlink.core.cluster import on_cluster
from envlink.errors import InputError, ModelError
from envlink.metareg.columns import plain_terms
from envlink.metareg.design import INTERCEPT, Design
from envlink.metareg.formula import rows_text
from envlink.tables.numeric import parquet_pieces

__all__ = ["design_from_source", "fit_on_cluster", "is_zarr", "check_cluster_source"]


def is_zarr(source: str | os.PathLike[str]) -> bool:
    """Whether ``source`` names a Zarr store (a ``.zarr`` folder or a folder with Zarr metadata)."""
    p = Path(source)
    return p.suffix.lower() == ".zarr" or any(
        (p / name).exists() for name in (".zgroup", ".zarray", "zarr.json"))


#: what a table file that is not Parquet is, by its suffix (envlink.tables.TABLE_SUFFIXES)
_NOT_PARQUET = {".csv": "a CSV", ".tsv": "a TSV", ".txt": "a text table", ".xlsx": "an Excel workbook",
                ".xls": "an Excel workbook"}


def check_cluster_source(source: str | os.PathLike[str], *, reader: str = "A cluster fit reads the source",
                         otherwise: str = "fit it in memory") -> None:
    """Refuse a single file that is not Parquet before any cluster work.

    A Zarr store, a folder and a glob pass (their files are checked when read); a file
    must start with Parquet's magic bytes ``PAR1`` (the Apache Parquet format's rule).
    ``reader`` and ``otherwise`` word the message (the command line names its options).

    Raises
    ------
    InputError
        ``source`` is a file that is not Parquet (a CSV, a workbook, ...).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "eff.csv"
    >>> _ = path.write_text("y,v\\n0.1,0.02\\n")
    >>> try:
    ...     check_cluster_source(path)
    ... except InputError as exc:
    ...     print(str(exc).split("' is ")[1])
    a CSV: convert it to Parquet (e.g. with -o eff.parquet on the envlink command that wrote it, or pandas' to_parquet) or fit it in memory.
    """
    p = Path(source)
    if not p.is_file() or is_zarr(p):
        return
    try:
        with p.open("rb") as f:
            if f.read(4) == b"PAR1":
                return
    except OSError:
        return  # the read reports it
    kind = _NOT_PARQUET.get(p.suffix.lower(), "not a Parquet file (it lacks Parquet's magic bytes)")
    raise InputError(f"{reader} as Parquet (a file, folder or glob of files) or a Zarr store; {str(source)!r} is "
                     f"{kind}: convert it to Parquet (e.g. with -o {p.stem}.parquet on the envlink command that "
                     f"wrote it, or pandas' to_parquet) or {otherwise}.")


def _zarr_pieces(source: str | os.PathLike[str], columns: list[str]) -> list[tuple[str, int, int]]:
    """(store, start row, rows) along the chunks of the first array, with the arrays checked."""
    import zarr

    try:
        group: Any = zarr.open_group(str(source), mode="r")
        arrays: list[Any] = [group[c] for c in columns]
    except Exception as exc:  # noqa: BLE001 - zarr raises several types for a missing array
        raise InputError(f"Cannot read arrays {columns} of the Zarr store {str(source)!r}: "
                         f"{exc}") from None
    k = arrays[0].shape[0]
    for c, a in zip(columns, arrays, strict=True):
        if a.ndim != 1 or a.shape[0] != k or a.dtype.kind not in "fiu":
            raise InputError(f"Array {c!r} of {str(source)!r} must be 1-D numbers of length "
                             f"{k}; got shape {a.shape} and dtype {a.dtype}.")
    step = int(arrays[0].chunks[0])
    return [(str(source), lo, min(step, k - lo)) for lo in range(0, k, step)]


def _load_piece(kind: str, piece: tuple[str, int, int], columns: list[str], n_vec: int,
                offset: int) -> dict[str, Any]:
    """Read one piece on a worker, leave out rows lacking a value, check the variances."""
    if kind == "zarr":
        import zarr

        group: Any = zarr.open_group(piece[0], mode="r")
        cols = [np.asarray(group[c][piece[1]:piece[1] + piece[2]]) for c in columns]
    else:
        import pyarrow.parquet as pq

        t = pq.ParquetFile(piece[0]).read_row_group(piece[1], columns=columns)
        cols = [t.column(c).to_numpy() for c in columns]
    dtype = np.float32 if all(c.dtype == np.float32 for c in cols) else np.float64
    cols = [np.asarray(c, dtype=dtype) for c in cols]
    y, v = cols[0], cols[1]
    lack = ~np.logical_and.reduce([np.isfinite(c) for c in cols])
    bad = np.flatnonzero(~lack & ~(v > 0))
    out = {"lack": np.flatnonzero(lack) + offset, "n_bad": int(bad.size),
           "bad": (int(bad[0]) + offset, float(v[bad[0]])) if bad.size else None}
    keep = ~lack if lack.any() else slice(None)
    X = np.empty((int((~lack).sum()), len(cols) - n_vec), dtype=dtype)
    for j, c in enumerate(cols[n_vec:]):
        X[:, j] = c[keep]
    out.update(y=y[keep], v=v[keep], X=X, n=int(X.shape[0]))
    return out


def design_from_source(source: str | os.PathLike[str], *, effect: str, variance: str,
                       moderators: str | None = None, persist: bool = True) -> Design:
    """A design over a Parquet dataset or a Zarr store, as Dask arrays chunked like the source.

    Each Parquet row group (or Zarr chunk) is one piece, read by one task. Rows with
    a missing or non-finite value are left out when a piece is read and reported
    with their row numbers in the whole source (files in name order).

    Parameters
    ----------
    source : path-like
        A Parquet file, a folder of Parquet files (a dataset) or a glob; or a Zarr
        store whose 1-D arrays are named like columns (float32 storage is summed in
        float64).
    effect, variance : str
        The effect and sampling-variance columns (arrays).
    moderators : str, optional
        A plain sum of numeric columns, e.g. ``"x1 + x2"``.
    persist : bool, default True
        Keep the columns in memory (the workers' memory under a distributed client)
        after the first read; False reads them from storage in every pass.

    Returns
    -------
    Design
    """
    import dask
    import dask.array as da

    check_cluster_source(source)
    terms = plain_terms(moderators)
    if terms is None:
        raise InputError(f"On a cluster the moderators must be a plain sum of numeric columns "
                         f"(like 'x1 + x2'); got {moderators!r}.")
    columns = [effect, variance, *terms]
    kind = "zarr" if is_zarr(source) else "parquet"
    pieces = (_zarr_pieces(source, columns) if kind == "zarr"
              else parquet_pieces(source, columns, numeric=columns, what="a cluster fit"))
    offsets = np.concatenate([[0], np.cumsum([pc[2] for pc in pieces])])
    load = dask.delayed(_load_piece, pure=True)
    parts = [load(kind, pc, columns, 2, int(o)) for pc, o in zip(pieces, offsets, strict=False)]
    if persist:
        parts = list(dask.persist(*parts))
    info = dask.compute(*[dask.delayed(_piece_info)(pt) for pt in parts])
    n_bad = sum(i["n_bad"] for i in info)
    if n_bad:
        row, value = next(i["bad"] for i in info if i["bad"] is not None)
        raise ModelError(
            f"Sampling variance {variance!r} must be positive and finite; {rows_text([row])} has "
            f"{value!r} ({n_bad} such row(s)). Fix or remove these rows; a zero variance "
            "usually means a zero cell that needs a continuity correction.")
    dropped = np.concatenate([i["lack"] for i in info]).tolist()
    dtype = info[0]["dtype"]
    get = dask.delayed(_field, pure=True)
    y, v, X = (da.concatenate([da.from_delayed(get(pt, f), shape, dtype=dtype)
                               for pt, shape in zip(parts, shapes, strict=True)])
               for f, shapes in (("y", [(i["n"],) for i in info]), ("v", [(i["n"],) for i in info]),
                                 ("X", [(i["n"], len(terms)) for i in info])))
    k = int(offsets[-1])
    keep = labels = None
    if dropped:
        keep = np.ones(k, dtype=bool)
        keep[dropped] = False
        labels = np.flatnonzero(keep)
    return Design(y, v, X, True, [INTERCEPT, *terms], labels, len(dropped), dropped, None, {},
                  keep, None)


def _piece_info(part: dict[str, Any]) -> dict[str, Any]:
    return {"n": part["n"], "lack": part["lack"], "n_bad": part["n_bad"], "bad": part["bad"],
            "dtype": part["y"].dtype}


def _field(part: dict[str, Any], name: str) -> Any:
    return part[name]


def fit_on_cluster(source: str | os.PathLike[str], *, effect: str, variance: str,
                   moderators: str | None = None, client: Any = None, persist: bool = True,
                   **options: Any) -> Any:
    """Fit a :class:`~envlink.metareg.model.MetaRegression` to a Parquet dataset or Zarr store on Dask.

    Each iteration's sums are reduced over the source's partitions (chunks) by the
    workers of ``client`` (a ``dask.distributed.Client`` or a scheduler address;
    None: Dask's current scheduler). ``options`` go to ``MetaRegression`` (``method``,
    ``test``, ``level``, ...; not ``nested`` or ``cluster``).

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np, pandas as pd
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> rng = np.random.default_rng(1)
    >>> for i in range(2):
    ...     x = rng.normal(size=500)
    ...     pd.DataFrame({"y": 0.2 * x + rng.normal(0, 0.3, 500), "v": np.full(500, 0.05),
    ...                   "x": x}).to_parquet(folder / f"part{i}.parquet")
    >>> m = fit_on_cluster(folder, effect="y", variance="v", moderators="x")
    >>> m.k_, m.terms_
    (1000, ['intercept', 'x'])
    """
    from envlink.metareg.model import MetaRegression

    for role in ("nested", "cluster"):
        if options.get(role) is not None:
            raise InputError(f"fit_on_cluster does not take {role}=; fit such models in memory.")
    with on_cluster(client):
        d = design_from_source(source, effect=effect, variance=variance, moderators=moderators,
                               persist=persist)
        return MetaRegression(**options).fit(d)
