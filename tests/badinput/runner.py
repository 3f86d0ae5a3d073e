"""Running a corpus case and checking the outcome its case promises (see :mod:`badinput.corpus`)."""

from __future__ import annotations

import base64
import contextlib
import html
import html.parser
import io
import math
import os
import re
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

import envlink
from badinput.corpus import Case

#: Seconds a process may take to reach its paused write (a loaded 2-core machine is slow).
REACH_TIMEOUT = 180
#: Seconds a stopped process may take to clean up and exit.
EXIT_TIMEOUT = 60


def materialise(case: Case, folder: Path) -> dict[str, bytes]:
    """Write the case's files and links into ``folder``; return the bytes of the files to keep."""
    for name, data in case.files:
        path = folder / name
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(data)
    for link, target in case.links:
        if link.startswith("hard:"):
            os.link(folder / target, folder / link[len("hard:"):])
        else:
            os.symlink(target, folder / link)
    return {name: (folder / name).read_bytes() for name in case.unchanged if (folder / name).is_file()}


def run_cli(case: Case, folder: Path) -> tuple[int, str]:
    """``envlink.cli.main(argv)`` in ``folder``, in this process; the exit code and stderr."""
    from envlink.cli import main

    err, out = io.StringIO(), io.StringIO()
    old, cache = Path.cwd(), os.environ.get("ENVLINK_CACHE")
    os.chdir(folder)
    os.environ["ENVLINK_CACHE"] = str(folder / ".cache")  # each case its own cache
    try:
        with warnings.catch_warnings(), contextlib.redirect_stderr(err), contextlib.redirect_stdout(out):
            warnings.simplefilter("default")  # envlink's warnings are shown as the command shows them
            rc = main(list(case.argv))
    finally:
        os.chdir(old)
        if cache is None:
            os.environ.pop("ENVLINK_CACHE", None)
        else:
            os.environ["ENVLINK_CACHE"] = cache
    return rc, err.getvalue()


def check_messages(case: Case, rc: int, err: str) -> None:
    """The exit code, no traceback, and each fragment in the error line (or in stderr)."""
    assert "Traceback" not in err and "unexpected error" not in err, err
    assert not re.search(r"\w+Warning: ", err), f"a library warning leaked: {err}"
    if case.rc == -1:
        assert rc in (1, 2), (rc, err)
    else:
        assert rc == case.rc, f"exit {rc}, expected {case.rc}:\n{err}"
    text = err
    if rc in (1, 2):
        lines = [ln for ln in err.splitlines() if re.match(r"envlink \w+: (error|failed): ", ln)]
        assert lines, f"no error line in:\n{err}"
        text = lines[0]
    for fragment in case.messages:
        assert re.search(fragment, text), f"{fragment!r} not in {text!r}"


def _matches(expected: str, cell: object) -> bool:
    text = "" if cell is None or (isinstance(cell, float) and math.isnan(cell)) else str(cell)
    if expected.startswith("~"):
        return re.search(expected[1:], text) is not None
    if expected.startswith("="):
        return text != "" and math.isclose(float(text), float(expected[1:]), rel_tol=1e-9, abs_tol=1e-12)
    return text == expected


def read_as_text(path: Path) -> pd.DataFrame:
    """A written table, every cell as text (blank for missing)."""
    if path.suffix == ".parquet":
        return pd.read_parquet(path).astype(object).where(lambda d: d.notna(), "").astype(str)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return envlink.read_table(path, as_text=True)


def check_rows(case: Case, folder: Path) -> None:
    """Every input row is in the output, in order, its columns unchanged; the expected cells."""
    out = folder / case.output
    assert out.is_file(), f"{case.output} was not written"
    got = read_as_text(out)
    if case.table:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            given = envlink.read_table(folder / case.table, as_text=True)
        assert len(got) == len(given), (len(got), len(given))
        typed = pd.read_parquet(out) if out.suffix == ".parquet" else None
        for j, col in enumerate(given.columns):
            assert str(got.columns[j]) == str(col), (got.columns[j], col)
            if typed is not None and pd.api.types.is_numeric_dtype(typed.iloc[:, j]):
                # Parquet types a column of numbers written as text (docs/outputs.md): the
                # same numbers, not the same text
                want = pd.to_numeric(given[col].replace("", None)).to_numpy(dtype=float)
                assert np.allclose(typed.iloc[:, j].to_numpy(dtype=float), want, rtol=0, atol=0,
                                   equal_nan=True), col
                continue
            assert got.iloc[:, j].tolist() == given[col].tolist(), col
    for column, values in case.rows:
        assert column in got.columns, (column, list(got.columns))
        cells = got[column].tolist()
        assert len(cells) == len(values), (column, cells)
        for i, (want, cell) in enumerate(zip(values, cells, strict=True)):
            assert _matches(want, cell), f"row {i + 1}, {column}: {cell!r} does not match {want!r}"


def check_kept(kept: dict[str, bytes], folder: Path) -> None:
    """Inputs and previous outputs keep their bytes; no temporary file is left anywhere."""
    for name, data in kept.items():
        assert (folder / name).read_bytes() == data, f"{name} was changed"
    leftovers = [str(p.relative_to(folder)) for p in folder.rglob("*") if _temporary(p)]
    assert not leftovers, f"temporary files left: {leftovers}"


def _temporary(path: Path) -> bool:
    """An output's temporary file (``.NAME.*.part``) or a store segment's (``.tmp-*``)."""
    return ".part" in path.name or path.name.startswith(".tmp-")


def _env(folder: Path, pause: str) -> dict[str, str]:
    env = dict(os.environ)
    root = str(Path(envlink.__file__).resolve().parent.parent)
    env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
    env["ENVLINK_CACHE"] = str(folder / ".cache")
    env["ENVLINK_READ_WORKERS"] = "1"
    env["ENVLINK_TEST_PAUSE_WRITE"] = str(folder / ".paused")
    env["ENVLINK_TEST_PAUSE_MATCH"] = pause
    return env


def stop_at_pause(case: Case, folder: Path) -> tuple[int, str]:
    """Run the case in a process, send its signal when the paused write is reached; exit code, stderr."""
    marker = folder / ".paused"
    proc = subprocess.Popen([sys.executable, "-m", "envlink", *case.argv], cwd=folder,
                            env=_env(folder, case.pause), stdout=subprocess.DEVNULL,
                            stderr=subprocess.PIPE, text=True, start_new_session=True)
    try:
        deadline = time.monotonic() + REACH_TIMEOUT
        while not marker.exists():
            if proc.poll() is not None or time.monotonic() > deadline:
                raise AssertionError(f"never reached the write of {case.pause!r}: {proc.communicate()[1]}")
            time.sleep(0.05)
        assert any(_temporary(p) for p in folder.rglob(".*")), "no temporary file at the pause"
        proc.send_signal(case.signal)
        try:
            _, err = proc.communicate(timeout=EXIT_TIMEOUT)
        except subprocess.TimeoutExpired:
            raise AssertionError(f"still running {EXIT_TIMEOUT} s after signal {case.signal}") from None
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    marker.unlink(missing_ok=True)
    return proc.returncode, err


def run_signal(case: Case, folder: Path) -> None:
    """A ``signal`` case: stopped cleanly, one line saying so, every kept file intact."""
    kept = materialise(case, folder)
    rc, err = stop_at_pause(case, folder)
    assert rc == case.rc, f"exit {rc}, expected {case.rc}:\n{err}"
    lines = [ln for ln in err.splitlines() if "stopped by" in ln]
    assert len(lines) == 1 and case.messages[0] in lines[0], err
    assert "Traceback" not in err, err
    check_kept(kept, folder)


def run_rerun(case: Case, folder: Path) -> None:
    """A ``rerun`` case: an uninterrupted run and a run stopped then rerun give the same CSV bytes."""
    whole, cut = folder / "whole", folder / "cut"
    for f in (whole, cut):
        f.mkdir()
        materialise(case, f)
    rc, err = run_cli(case, whole)
    assert rc == 0, err
    rc, err = stop_at_pause(case, cut)
    assert rc == 128 + case.signal, err
    check_kept({}, cut)
    assert not (cut / case.output).exists()
    rc, err = run_cli(case, cut)
    assert rc == 0, err
    assert (cut / case.output).read_bytes() == (whole / case.output).read_bytes()


class _Tags(html.parser.HTMLParser):
    """The tags, attributes and images of a page."""

    def __init__(self) -> None:
        super().__init__()
        self.tags: list[str] = []
        self.attributes: list[str] = []
        self.images: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append(tag)
        self.attributes += [name for name, _ in attrs]
        if tag == "img":
            self.images.append(dict(attrs).get("src") or "")


def run_report(case: Case) -> None:
    """A ``report`` case: the hostile text in every user string of the report; escaped, figures drawn."""
    from badinput.report_case import hostile_report

    text = case.argv[0]
    page = hostile_report(text, usetex=len(case.argv) > 1)
    parser = _Tags()
    parser.feed(page)
    assert parser.tags.count("script") == 1, "a user string became a script"
    assert not [a for a in parser.attributes if a.startswith("on")], "a user string became an attribute"
    assert set(parser.tags) <= {"html", "head", "meta", "title", "style", "script", "body", "h1", "h2", "h3",
                                "p", "table", "thead", "tbody", "tr", "th", "td", "figure", "img",
                                "figcaption", "ul", "li", "div", "details", "summary", "pre", "code"}, parser.tags
    assert len(parser.images) >= 5, len(parser.images)
    for src in parser.images:
        png = base64.b64decode(src.split(",", 1)[1])
        assert png.startswith(b"\x89PNG\r\n\x1a\n") and len(png) > 1000
    if any(ch in text for ch in "<>&\""):
        assert text not in page, "a user string reached the page unescaped"
    assert html.escape(text.split("\n")[0], quote=True) in page, "the user string is missing"
