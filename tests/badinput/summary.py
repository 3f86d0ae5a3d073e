"""Count the corpus's cases by category and outcome, for tests/badinput/README.md.

Usage: ``python tests/badinput/summary.py`` prints the table; ``--update`` writes it
into the README between the ``<!-- summary -->`` markers.
"""

from __future__ import annotations

import argparse
import sys
from collections import Counter
from collections.abc import Sequence
from pathlib import Path

README = Path(__file__).with_name("README.md")
_START, _END = "<!-- summary -->", "<!-- /summary -->"


def render_table(cases: Sequence[object]) -> str:
    """The markdown table: one row per category, one column per outcome, totals."""
    from badinput.corpus import CATEGORIES

    counts = Counter((c.category, c.summary_outcome()) for c in cases)  # type: ignore[attr-defined]
    outcomes = sorted({o for _, o in counts})
    lines = ["| category | " + " | ".join(outcomes) + " | cases |",
             "|---|" + "---:|" * (len(outcomes) + 1)]
    for cat in CATEGORIES:
        row = [counts.get((cat, o), 0) for o in outcomes]
        lines.append(f"| {cat} | " + " | ".join(str(n) if n else "" for n in row) + f" | {sum(row)} |")
    totals = [sum(counts.get((cat, o), 0) for cat in CATEGORIES) for o in outcomes]
    lines.append("| **all** | " + " | ".join(str(n) for n in totals) + f" | **{sum(totals)}** |")
    return "\n".join(lines)


def replace_table(text: str, table: str) -> str:
    """``text`` with the block between the summary markers replaced by ``table``."""
    head, _, rest = text.partition(_START)
    _, _, tail = rest.partition(_END)
    return f"{head}{_START}\n{table}\n{_END}{tail}"


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--update", action="store_true", help="write the table into README.md")
    args = parser.parse_args(argv)
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
    from badinput.corpus import all_cases

    table = render_table(all_cases())
    if args.update:
        README.write_text(replace_table(README.read_text(encoding="utf-8"), table), encoding="utf-8")
    else:
        print(table)
    return 0


if __name__ == "__main__":
    sys.exit(main())
