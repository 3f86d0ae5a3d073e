"""Old home of the extraction cache's names, kept so existing imports work.

The request-keyed result cache became the cell-series store
(:mod:`envlink.extract.store`, docs/store.md): :func:`default_cache_dir` is
:func:`envlink.extract.store.cache_root`, and :class:`CacheWarning` lives in
:mod:`envlink.errors`.
"""

from __future__ import annotations

from pathlib import Path

from envlink.errors import CacheWarning

__all__ = ["CacheWarning", "default_cache_dir"]


def default_cache_dir() -> Path:
    """envlink's cache folder (:func:`envlink.extract.store.cache_root`).

    Examples
    --------
    >>> default_cache_dir().name != ""
    True
    """
    from envlink.extract.store import cache_root

    return cache_root()
