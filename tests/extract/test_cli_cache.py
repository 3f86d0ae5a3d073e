"""``envlink cache``: list, size and clear the cell-series store; exit codes 0/1/2."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

import envlink
from envlink.cli import main

from .test_store import rows, write_grid


@pytest.fixture
def filled(tmp_path: Path) -> tuple[Path, list[Path]]:
    cache = tmp_path / "cache"
    grids = []
    for k in range(2):
        grids.append(tmp_path / f"g{k}.nc")
        write_grid(grids[-1], seed=k)
        envlink.attach(rows(), envlink.open_grid(grids[-1]), name="v", cache_dir=str(cache))
    return cache, grids


def test_list_shows_each_grid_its_cells_span_size_and_use(filled, capsys) -> None:
    cache, grids = filled
    assert main(["cache", "--dir", str(cache)]) == 0
    out = capsys.readouterr().out
    assert str(grids[0]) in out and str(grids[1]) in out and "[sst]" in out
    assert "1991-01-01 to 2000-12-01" in out and "last used 20" in out and "total" in out
    assert main(["cache", "list", "--json", "--dir", str(cache)]) == 0
    listed = json.loads(capsys.readouterr().out)
    assert len(listed["stores"]) == 2
    assert listed["total_bytes"] == sum(s["size_bytes"] for s in listed["stores"]) > 0
    s = listed["stores"][0]
    assert s["cells"] > 0 and s["time_span"] == "1991-01-01 to 2000-12-01" and s["segments"] == 1


def test_clear_one_grid_by_file_or_key_then_all(filled, capsys) -> None:
    cache, grids = filled
    assert main(["cache", "clear", str(grids[0]), "--dir", str(cache)]) == 0
    assert "removed 1 store" in capsys.readouterr().err
    main(["cache", "list", "--json", "--dir", str(cache)])
    (left,) = json.loads(capsys.readouterr().out)["stores"]
    assert left["grid"] == str(grids[1])
    assert main(["cache", "clear", left["key"][:12], "--dir", str(cache)]) == 0
    capsys.readouterr()
    envlink.attach(rows(), envlink.open_grid(grids[0]), name="v", cache_dir=str(cache))
    assert main(["cache", "clear", "--all", "--dir", str(cache)]) == 0
    assert "removed 1 store" in capsys.readouterr().err
    assert main(["cache", "--dir", str(cache)]) == 0
    assert "(empty)" in capsys.readouterr().out


@pytest.mark.parametrize("argv, message", [
    (["clear"], "Say what to clear"),
    (["clear", "x", "--all"], "Say what to clear"),
    (["clear", "nowhere.nc"], "No store in .* matches 'nowhere.nc'"),
    (["list", "--all"], "go with 'envlink cache clear'"),
])
def test_bad_usage_exits_2(filled, capsys, argv, message) -> None:
    import re

    cache, _ = filled
    assert main(["cache", *argv, "--dir", str(cache)]) == 2
    assert re.search(message, capsys.readouterr().err)
    assert main(["cache", "bogus"]) == 2


def test_help(capsys) -> None:
    assert main(["cache", "--help"]) == 0
    out = capsys.readouterr().out
    assert "ENVLINK_STORE_MAX" in out and "Exit codes" in out and "--no-progress" in out


@pytest.mark.parametrize("argv", [["clear", "--all", "GRID"], ["clear", "--all", "--dir", "CACHE", "GRID"],
                                  ["clear", "GRID", "--all", "GRID"]])
def test_all_and_a_grid_after_an_option_is_the_commands_own_message(filled, capsys, argv) -> None:
    # common practice for a command line: a word after an option is still the command's
    # word, so `envlink cache` itself says --all and GRID do not go together (not argparse's
    # "unrecognized arguments"), exit 2, and nothing is cleared
    cache, grids = filled
    words = [str(cache) if w == "CACHE" else str(grids[0]) if w == "GRID" else w for w in argv]
    if "--dir" not in words:
        words += ["--dir", str(cache)]
    assert main(["cache", *words]) == 2
    err = capsys.readouterr().err
    assert err.startswith("envlink cache: error: Say what to clear") and "not both" in err
    assert "usage:" not in err and "unrecognized" not in err
    assert main(["cache", "list", "--json", "--dir", str(cache)]) == 0
    assert len(json.loads(capsys.readouterr().out)["stores"]) == 2  # nothing cleared
    assert main(["cache", "clear", "--all", str(grids[0]), "--bogus"]) == 2  # an unknown option: argparse's
    assert "unrecognized arguments: " in capsys.readouterr().err
