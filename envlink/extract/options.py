"""Reading the options of :func:`envlink.attach` that are not a vocabulary: the baseline years.

The three vocabularies (statistics, windows, spatial rules) are registries owned by
their modules: :data:`envlink.extract.statistics.STATISTICS`,
:data:`envlink.extract.windows.WINDOWS` and :data:`envlink.extract.rules.SPATIAL_RULES`.
Bad values raise :class:`envlink.errors.InputError` with the project's parameter
message.
"""

from __future__ import annotations

import re

from envlink.errors import param_error

__all__ = ["parse_baseline"]

CALLER = "attach"


def parse_baseline(baseline: str | tuple[int, int] | None) -> tuple[int, int] | None:
    """Parse ``'YYYY-YYYY'`` (inclusive years) or a pair of years; None stays None.

    Examples
    --------
    >>> parse_baseline("1985-2012")
    (1985, 2012)
    """
    if baseline is None:
        return None
    if isinstance(baseline, tuple | list) and len(baseline) == 2:
        y0, y1 = int(baseline[0]), int(baseline[1])
    else:
        m = re.fullmatch(r"\s*(\d{4})\s*[-/]\s*(\d{4})\s*", str(baseline))
        if not m:
            raise param_error("baseline", CALLER, "two years 'YYYY-YYYY' (inclusive)", baseline)
        y0, y1 = int(m.group(1)), int(m.group(2))
    if y1 < y0:
        raise param_error("baseline", CALLER, "two years 'YYYY-YYYY' with the first not after the second", baseline)
    return y0, y1
