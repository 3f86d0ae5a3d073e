"""numba's compiled kernels are cached in the user's cache folder, never in the package folder.

Each check runs a fit in a fresh Python process whose HOME, XDG_CACHE_HOME and
ENVLINK_CACHE point into ``tmp_path`` (numba decides where to cache when a function
is decorated, so only a new process shows it). Expected locations: the rule in
``envlink.metareg._kernels.cache_folder`` (common practice for per-user caches:
``$XDG_CACHE_HOME``, else ``~/.cache``).
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

import envlink

pytestmark = pytest.mark.requires_numba

PACKAGE = Path(envlink.__file__).resolve().parent
ROOT = PACKAGE.parent
FIT = (
    "import numpy as np, envlink\n"
    "m = envlink.MetaRegression(method='REML').fit(y=np.array([0.1, 0.5, 0.3, 0.9, 0.2]),\n"
    "                                             v=np.full(5, 0.05))\n"
    "from envlink.metareg import _kernels\n"
    "print(_kernels._CACHE_FOLDER)\n"
)


def _package_files() -> set[Path]:
    # byte-code (.pyc) is Python's own; other test processes may write it meanwhile
    return {p for p in PACKAGE.rglob("*") if p.is_file() and p.suffix != ".pyc"}


def _run(tmp_path: Path, **env: str) -> str:
    base = {k: v for k, v in os.environ.items() if not k.startswith("NUMBA_")}
    base.update(HOME=str(tmp_path / "home"), XDG_CACHE_HOME=str(tmp_path / "xdg"),
                PYTHONDONTWRITEBYTECODE="1", ENVLINK_NUMBA="1",
                PYTHONPATH=os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]))
    base.update(env)
    if "ENVLINK_CACHE" not in env:
        base.pop("ENVLINK_CACHE", None)
    out = subprocess.run([sys.executable, "-c", FIT], env=base, capture_output=True, text=True,
                         check=False, timeout=300)
    assert out.returncode == 0, out.stderr
    return out.stdout.strip()


def _cached(folder: Path) -> list[Path]:
    return sorted(folder.rglob("*.nbi")) + sorted(folder.rglob("*.nbc"))


def test_cache_goes_to_envlink_cache_not_the_package(tmp_path: Path) -> None:
    before = _package_files()
    shown = _run(tmp_path, ENVLINK_CACHE=str(tmp_path / "cache"))
    assert Path(shown) == tmp_path / "cache" / "numba"
    assert _cached(tmp_path / "cache" / "numba"), "no numba cache file in $ENVLINK_CACHE/numba"
    assert not _cached(tmp_path / "xdg") and not _cached(tmp_path / "home")
    assert _package_files() - before == set()


def test_cache_defaults_to_xdg_then_home(tmp_path: Path) -> None:
    before = _package_files()
    assert Path(_run(tmp_path)) == tmp_path / "xdg" / "envlink" / "numba"
    assert _cached(tmp_path / "xdg" / "envlink" / "numba")
    no_xdg = tmp_path / "second"
    shown = _run(no_xdg, XDG_CACHE_HOME="")
    assert Path(shown) == no_xdg / "home" / ".cache" / "envlink" / "numba"
    assert _cached(no_xdg / "home" / ".cache" / "envlink" / "numba")
    assert _package_files() - before == set()


def test_unwritable_cache_folder_means_no_cache(tmp_path: Path) -> None:
    # a cache path below a plain file cannot be created, whoever runs the test
    (tmp_path / "plain-file").write_text("not a folder")
    before = _package_files()
    shown = _run(tmp_path, ENVLINK_CACHE=str(tmp_path / "plain-file" / "cache"))
    assert shown == "None"
    assert _package_files() - before == set()
    assert not _cached(tmp_path)
    if getattr(os, "geteuid", lambda: 1)() != 0:  # read-only stops writes except for the superuser
        ro = tmp_path / "ro"
        ro.mkdir()
        ro.chmod(0o500)
        try:
            assert _run(tmp_path, ENVLINK_CACHE=str(ro)) == "None"
        finally:
            ro.chmod(0o700)
        assert _package_files() - before == set()
