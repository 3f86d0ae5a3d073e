"""How moderator rows are permuted in permutation tests and scans: one registry, seeded draws.

:data:`PERMUTATION_SCHEMES` names the ways the moderator rows may be rearranged
against the effects and variances (the API's ``scheme=``, ``envlink fit
--permute``, the project file's ``permute`` keys and the docs read it):

- ``rows``: any row's moderators may go to any row (independent effects; the
  default without ``nested=``);
- ``within``: rows are rearranged within their ``nested=`` group only, so each
  study keeps its own set of moderator values (the default with ``nested=``);
- ``blocks``: whole groups exchange their rows' moderators with groups of the same
  size, so what varies between studies is tested and each study's rows stay together.

:func:`draw_permutations` draws them from a :class:`numpy.random.Generator` in
batches: the draws of a seed are the same whatever the batch sizes, so the fast
stacked test and the reference loop of single refits see the same permutations.
This module imports NumPy only when drawing, so the command line can read the
registry cheaply.

Examples
--------
>>> PERMUTATION_SCHEMES.parse("Within").label(), PERMUTATION_SCHEMES["blocks"].info["needs_groups"]
('within', True)
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from envlink.core.registry import Entry, Registry
from envlink.errors import ModelError, ModelOptionError

if TYPE_CHECKING:
    import numpy as np

__all__ = ["PERMUTATION_SCHEMES", "default_scheme", "draw_permutations", "Shuffler"]

#: ways of rearranging the moderator rows
PERMUTATION_SCHEMES: Registry[Any] = Registry("permutation scheme", param="scheme",
                                              caller="permutation_test")
PERMUTATION_SCHEMES.add(Entry(
    "rows", "every row's moderators may go to any row (the default without nested=)",
    info={"needs_groups": False, "words": "rows permuted freely"}))
PERMUTATION_SCHEMES.add(Entry(
    "within", "rows rearranged within their nested= group only (the default with nested=)",
    aliases=("within-studies",),
    info={"needs_groups": True, "words": "rows permuted within studies"}))
PERMUTATION_SCHEMES.add(Entry(
    "blocks", "whole nested= groups exchanged with groups of the same size",
    aliases=("studies",),
    info={"needs_groups": True, "words": "whole studies exchanged among studies of the same size"}))


def default_scheme(nested: bool) -> str:
    """The scheme used when none is given: ``within`` for nested models, else ``rows``.

    Examples
    --------
    >>> default_scheme(True), default_scheme(False)
    ('within', 'rows')
    """
    return "within" if nested else "rows"


class Shuffler:
    """Seeded permutations of ``k`` rows under one scheme, drawn batch by batch.

    Parameters
    ----------
    k : int
        Number of rows.
    scheme : str
        A name of :data:`PERMUTATION_SCHEMES`.
    groups : array of labels, optional
        The ``nested=`` group of each row (needed by ``within`` and ``blocks``).
    seed : int or numpy.random.Generator, optional

    Examples
    --------
    >>> import numpy as np
    >>> s = Shuffler(6, "within", groups=np.array([0, 0, 0, 1, 1, 1]), seed=1)
    >>> p = s.draw(4)
    >>> bool((np.sort(p[:, :3], axis=1) == [0, 1, 2]).all() and (p[:, 3:] >= 3).all())
    True
    >>> a = Shuffler(6, "rows", seed=5).draw(3); b = Shuffler(6, "rows", seed=5)
    >>> bool((np.vstack([b.draw(1), b.draw(2)]) == a).all())
    True
    """

    def __init__(self, k: int, scheme: str, *, groups: Any = None, seed: Any = None) -> None:
        import numpy as np
        import pandas as pd

        entry = PERMUTATION_SCHEMES.parse(scheme).entry
        self.scheme = entry.name
        self.k = int(k)
        self.rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
        if entry.info["needs_groups"]:
            if groups is None:
                raise ModelOptionError(f"The permutation scheme {entry.name!r} rearranges rows within or "
                                 "between nested= groups; fit the model with nested=COLUMN, or use "
                                 "scheme='rows'.")
            codes = pd.factorize(np.asarray(groups), sort=False)[0]
            if codes.shape != (self.k,) or (codes < 0).any():
                raise ModelError("The nested= labels must give one group to every row.")
            self.codes = codes
            self.order = np.argsort(codes, kind="stable")
            sc = codes[self.order]
            self.starts = np.concatenate([[0], np.flatnonzero(np.diff(sc)) + 1])
            self.sizes = np.diff(np.append(self.starts, self.k))  # rows of group 0, 1, ...
            rank = np.empty(self.k, dtype=np.int64)
            rank[self.order] = np.arange(self.k)
            self.pos = rank - self.starts[codes]  # each row's position within its group

    def movable(self) -> int:
        """How many rows can change places (rows in groups of 2 or more; for ``blocks``,
        in groups that have a partner of the same size)."""
        import numpy as np

        if self.scheme == "rows":
            return self.k if self.k > 1 else 0
        if self.scheme == "within":
            return int(self.sizes[self.sizes > 1].sum())
        vals, counts = np.unique(self.sizes, return_counts=True)
        return int((vals * counts)[counts > 1].sum())

    def draw(self, n: int) -> np.ndarray:
        """The next ``n`` permutations, an ``(n, k)`` array of row positions."""
        import numpy as np

        if self.scheme == "rows":
            return np.argsort(self.rng.random((n, self.k)), axis=1, kind="stable")
        if self.scheme == "within":
            key = self.codes[self.order][None, :] + self.rng.random((n, self.k))
            out = np.empty((n, self.k), dtype=np.int64)
            out[:, self.order] = self.order[np.argsort(key, axis=1, kind="stable")]
            return out
        S = self.sizes.shape[0]
        canon = np.argsort(self.sizes, kind="stable")
        key = self.sizes[None, :] + self.rng.random((n, S)) / 2.0
        target = np.empty((n, S), dtype=np.int64)
        target[:, canon] = np.argsort(key, axis=1, kind="stable")
        return self.order[self.starts[target[:, self.codes]] + self.pos[None, :]]


def draw_permutations(k: int, n: int, scheme: str = "rows", *, groups: Any = None,
                      seed: Any = None) -> np.ndarray:
    """``n`` seeded permutations of ``k`` rows under ``scheme`` (see :class:`Shuffler`).

    Examples
    --------
    >>> import numpy as np
    >>> p = draw_permutations(4, 3, "blocks", groups=["a", "a", "b", "b"], seed=0)
    >>> sorted({tuple(r) for r in p.tolist()} - {(0, 1, 2, 3), (2, 3, 0, 1)})
    []
    """
    return Shuffler(k, scheme, groups=groups, seed=seed).draw(n)
