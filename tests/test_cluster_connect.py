"""An address where no Dask scheduler answers is bad input, quickly, whatever answers there.

Checked against common practice for network clients: a connection attempt ends within
its stated timeout (envlink.core.cluster.connect, docs/scaling.md), and a reply in
another protocol is reported, not read on. The other ends are loopback TCP servers
started here: one that accepts and never answers, one that answers like a web server
(an HTTP reply). A table that is not Parquet is refused before any cluster is
contacted (the Apache Parquet format's rule: a file starts with the magic bytes PAR1).
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from pathlib import Path

import pytest

import envlink
from envlink.cli import main
from envlink.core.cluster import connect, connect_timeout
from envlink.errors import InputError

pytestmark = [pytest.mark.requires_dask]

TIMEOUT = 1.0  # seconds given to connect; it must give up within this plus its 2 s grace
HTTP_REPLY = b"HTTP/1.0 400 Bad request\r\nContent-Type: text/html\r\n\r\n<html><body>no</body></html>\r\n"


def _server(reply: bytes | None) -> Iterator[str]:
    """A loopback TCP server that accepts every connection, then sends ``reply`` (None: nothing)."""
    srv = socket.socket()
    srv.bind(("127.0.0.1", 0))
    srv.listen(8)
    held: list[socket.socket] = []
    stop = threading.Event()

    def serve() -> None:
        srv.settimeout(0.1)
        while not stop.is_set():
            try:
                conn, _ = srv.accept()
            except OSError:
                continue
            held.append(conn)  # kept open: a silent server never closes either
            if reply is not None:
                conn.sendall(reply)

    thread = threading.Thread(target=serve, daemon=True)
    thread.start()
    try:
        yield f"tcp://127.0.0.1:{srv.getsockname()[1]}"
    finally:
        stop.set()
        thread.join(2)
        for conn in held:
            conn.close()
        srv.close()


@pytest.fixture(params=["silent", "http"])
def not_dask(request: pytest.FixtureRequest) -> Iterator[str]:
    pytest.importorskip("distributed")
    yield from _server(None if request.param == "silent" else HTTP_REPLY)


def test_a_service_that_is_not_dask_is_an_input_error_within_the_timeout(not_dask: str) -> None:
    import dask

    before = dask.config.get("scheduler", None)
    start = time.monotonic()
    with pytest.raises(InputError, match="No Dask scheduler answers at .*may not be a Dask scheduler") as info:
        connect(not_dask, timeout=TIMEOUT)
    assert "within 1 s" in str(info.value) or "not in Dask's protocol" in str(info.value)
    assert "MemoryError" not in str(info.value)  # an HTTP reply's bytes once read as a message length
    assert time.monotonic() - start < TIMEOUT + 2 + 3  # the hard deadline, with slack for a busy machine
    # the failed client does not stay dask's default scheduler (later computes of this
    # process would ask for a cluster that is not there)
    assert dask.config.get("scheduler", None) == before
    import dask.array as da
    import numpy as np

    assert float(da.from_array(np.ones(4), chunks=2).sum().compute()) == 4.0


def test_the_timeout_comes_from_the_environment(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("ENVLINK_SCHEDULER_TIMEOUT", raising=False)
    assert connect_timeout() == 10.0  # docs/scaling.md
    monkeypatch.setenv("ENVLINK_SCHEDULER_TIMEOUT", "2.5")
    assert connect_timeout() == 2.5
    for bad in ("0", "-1", "soon", "inf"):
        monkeypatch.setenv("ENVLINK_SCHEDULER_TIMEOUT", bad)
        with pytest.raises(InputError, match="ENVLINK_SCHEDULER_TIMEOUT must be a number of seconds"):
            connect_timeout()


def test_attach_keeps_naming_its_parameter(not_dask: str) -> None:
    from envlink.extract.cluster_read import cluster_client

    with pytest.raises(InputError) as info, cluster_client(not_dask):
        pass
    assert info.value.param == "client"  # shown as --scheduler on the command line


def _cli(*args: str) -> subprocess.CompletedProcess[str]:
    env = {**os.environ, "ENVLINK_SCHEDULER_TIMEOUT": str(TIMEOUT),
           "PYTHONPATH": str(Path(envlink.__file__).parents[1])}
    return subprocess.run([sys.executable, "-m", "envlink", *args], capture_output=True, text=True, env=env,
                          timeout=60)


def _inputs(tmp_path: Path) -> dict[str, Path]:
    """A Parquet effects table, a located sites table and a small monthly grid."""
    import numpy as np
    import pandas as pd
    import xarray as xr

    out = {"effects": tmp_path / "eff.parquet", "sites": tmp_path / "sites.csv", "grid": tmp_path / "sst.nc"}
    pd.DataFrame({"y": [0.1, 0.2, 0.3], "v": [0.01, 0.02, 0.03], "x": [1.0, 2.0, 3.0]}).to_parquet(out["effects"])
    pd.DataFrame({"site_lat": [0.5], "site_lon": [130.5], "period_start": ["2001-03-01"],
                  "period_end": ["2001-05-31"]}).to_csv(out["sites"], index=False)
    xr.Dataset({"sst": (("time", "lat", "lon"), np.full((12, 4, 4), 26.0, dtype=np.float32))},
               coords={"time": pd.date_range("2001-01-01", periods=12, freq="MS"),
                       "lat": [-1.5, -0.5, 0.5, 1.5], "lon": [129.5, 130.5, 131.5, 132.5]}).to_netcdf(out["grid"])
    return out


def test_commands_give_the_bad_input_message_and_exit_2(not_dask: str, tmp_path: Path) -> None:
    pytest.importorskip("pyarrow")
    files = _inputs(tmp_path)
    for args in (["fit", str(files["effects"]), "--effect", "y", "--variance", "v", "--moderators", "x"],
                 ["attach", str(files["sites"]), "--grid", str(files["grid"]), "--name", "sst", "--no-progress",
                  "-o", str(tmp_path / "out.csv")]):
        start = time.monotonic()
        done = _cli(*args, "--scheduler", not_dask)
        assert time.monotonic() - start < TIMEOUT + 2 + 20  # interpreter start and imports included
        assert done.returncode == 2, done.stderr
        assert f"envlink {args[0]}: error: " in done.stderr and "No Dask scheduler answers at" in done.stderr
        assert "may not be a Dask scheduler" in done.stderr and "Traceback" not in done.stderr
        assert "This is a bug" not in done.stderr
    assert "--scheduler" in done.stderr  # attach's client= named as its option
    assert not (tmp_path / "out.csv").exists()


def test_a_csv_on_a_cluster_is_refused_before_connecting(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    table = tmp_path / "eff1.csv"
    table.write_text("y,v,x\n0.1,0.01,1\n0.2,0.02,2\n0.3,0.03,3\n", encoding="utf-8")
    # no scheduler listens at this address: the message must be about the table, at once
    start = time.monotonic()
    assert main(["fit", str(table), "--effect", "y", "--variance", "v", "--moderators", "x",
                 "--scheduler", "tcp://127.0.0.1:9"]) == 2
    assert time.monotonic() - start < 5
    err = capsys.readouterr().err
    assert "--scheduler reads TABLE as Parquet (a file, folder or glob of files) or a Zarr store" in err
    assert f"{str(table)!r} is a CSV: convert it to Parquet" in err and "eff1.parquet" in err
    assert "fit without --scheduler" in err and "No Dask scheduler" not in err


def test_a_parquet_file_passes_the_check(tmp_path: Path) -> None:
    pytest.importorskip("pyarrow")
    import pandas as pd

    from envlink.metareg.chunked import check_cluster_source

    pd.DataFrame({"y": [0.1]}).to_parquet(tmp_path / "a.parquet")
    check_cluster_source(tmp_path / "a.parquet")  # a Parquet file
    check_cluster_source(tmp_path)  # a folder
    check_cluster_source(str(tmp_path / "*.parquet"))  # a glob
    (tmp_path / "b.parquet").write_text("y\n0.1\n")  # a CSV under a Parquet name
    with pytest.raises(InputError, match="lacks Parquet's magic bytes"):
        check_cluster_source(tmp_path / "b.parquet")
