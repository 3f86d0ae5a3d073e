"""A loopback HTTP server for the remote-grid tests: files of one folder, Range requests, bytes counted.

It listens on 127.0.0.1 only, in a daemon thread, and stops when the test's context
ends. ``served`` counts the body bytes sent, so a test can compare the bytes a read
fetched with the chunk arithmetic.
"""

from __future__ import annotations

import contextlib
import http.server
import os
import re
import threading
from collections.abc import Iterator
from pathlib import Path

_LOCK = threading.Lock()


class _Handler(http.server.SimpleHTTPRequestHandler):
    counter: dict[str, int]

    def _count(self, n: int) -> None:
        # counted before the bytes go out (the client may return as soon as it has them) and
        # under a lock (requests are served in several threads)
        with _LOCK:
            self.counter["served"] += n

    def log_message(self, *args: object) -> None:  # keep the test output quiet
        pass

    def send_head(self):  # type: ignore[no-untyped-def]
        path = self.translate_path(self.path)
        if os.path.isdir(path) or not os.path.exists(path):
            self.send_error(404, "not found")
            return None
        size = os.path.getsize(path)
        rng = re.match(r"bytes=(\d+)-(\d*)$", self.headers.get("Range", ""))
        fh = open(path, "rb")  # noqa: SIM115 - the base class closes it
        if rng is None:
            self.send_response(200)
            self.send_header("Content-Length", str(size))
            self.send_header("Accept-Ranges", "bytes")
            self.send_header("ETag", f'"{os.stat(path).st_mtime_ns}-{size}"')
            self.end_headers()
            return fh
        a = int(rng.group(1))
        b = min(int(rng.group(2)) if rng.group(2) else size - 1, size - 1)
        self.send_response(206)
        self.send_header("Content-Range", f"bytes {a}-{b}/{size}")
        self.send_header("Content-Length", str(b - a + 1))
        self.send_header("Accept-Ranges", "bytes")
        self.end_headers()
        fh.seek(a)
        data = fh.read(b - a + 1)
        fh.close()
        if self.command != "HEAD":
            self._count(len(data))
            self.wfile.write(data)
        return None

    def copyfile(self, source, outputfile):  # type: ignore[no-untyped-def]
        data = source.read()
        self._count(len(data))
        outputfile.write(data)


@contextlib.contextmanager
def serve(folder: Path) -> Iterator[tuple[str, dict[str, int]]]:
    """Serve ``folder`` on 127.0.0.1; yields the base URL and the byte counter."""
    counter = {"served": 0}
    handler = type("Handler", (_Handler,), {"counter": counter})
    server = http.server.ThreadingHTTPServer(
        ("127.0.0.1", 0), lambda *a, **k: handler(*a, directory=str(folder), **k))
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{server.server_address[1]}", counter
    finally:
        server.shutdown()
        server.server_close()
