"""Corpus cases of whole runs: output paths, interrupts (SIGINT, SIGTERM, SIGHUP) and report escaping."""

from __future__ import annotations

import signal

from badinput.cases_locate import HEADER, ROWS, SITES
from badinput.cases_model import ATTACH, FIT_TABLE, LOCATED, PROJECT, STUDIES
from badinput.corpus import Case, csv_bytes, grid_bytes

TABLE = csv_bytes(HEADER, ROWS)
GAZ = csv_bytes(("name", "lat", "lon"), [["Récif Nord", "-8.5", "160.25"]])
PREVIOUS = b"a previous output that must survive\n"
FIT = ("fit", "t.csv", "--effect", "es", "--variance", "es_var")


def _o(id: str, argv: tuple[str, ...], rc: int, messages: tuple[str, ...] = (), files: dict[str, bytes] | None = None,
       links: tuple[tuple[str, str], ...] = (), output: str = "", table: str = "t.csv") -> Case:
    f = files if files is not None else {"t.csv": TABLE}
    return Case(id, "output paths", argv, tuple(f.items()), rc, messages, table=table if rc == 0 else "",
                output=output if rc == 0 else "", unchanged=tuple(f) if rc else tuple(k for k in f if k == table),
                links=links)


def _project(name: str = "enriched", extra: str = "") -> bytes:
    return (PROJECT.replace("MODERATORS", "`my x`").replace("[export]", f'[export]\nname = "{name}"') + extra).encode()


def output_paths() -> list[Case]:
    """Every output option of every command: an input is never replaced, an existing file only with --force."""
    sites_o = SITES[:3]
    rest = SITES[4:]
    fit_files = {"t.csv": FIT_TABLE}
    run_files = {"studies.csv": STUDIES, "p.toml": _project()}
    c = [
        _o("out-sites-is-table", (*sites_o, "t.csv", *rest), 2, (r"'t\.csv'", "input", "TABLE")),
        _o("out-sites-is-table-force", (*sites_o, "t.csv", *rest, "--force"), 2, ("input", "--force")),
        _o("out-sites-is-table-other-spelling", (*sites_o, "sub/../t.csv", *rest, "--force"), 2, ("input",),
           files={"t.csv": TABLE, "sub/keep": b""}),
        _o("out-sites-is-table-symlink", (*sites_o, "link.csv", *rest, "--force"), 2, ("input",),
           links=(("link.csv", "t.csv"),)),
        _o("out-sites-is-table-hardlink", (*sites_o, "hard.csv", *rest, "--force"), 2, ("input",),
           links=(("hard:hard.csv", "t.csv"),)),
        _o("out-sites-is-gazetteer", ("sites", "t.csv", "-o", "g.csv", "--site", "reef", "--gazetteer", "g.csv",
                                      "--force"), 2, ("--gazetteer",), files={"t.csv": TABLE, "g.csv": GAZ}),
        _o("out-sites-exists", SITES, 2, (r"'o\.csv'", "--force"), files={"t.csv": TABLE, "o.csv": PREVIOUS}),
        _o("out-sites-exists-force", (*SITES, "--force"), 0, files={"t.csv": TABLE, "o.csv": PREVIOUS},
           output="o.csv"),
        _o("out-sites-folder", (*sites_o, "d", *rest), 2, (r"'d'",), files={"t.csv": TABLE, "d/keep": b""}),
        _o("out-sites-no-extension", (*sites_o, "out", *rest), 2, (r"'out'",)),
        _o("out-sites-bad-extension", (*sites_o, "o.txt", *rest), 2, (r"'\.txt'",)),
        _o("out-sites-below-a-file", (*sites_o, "blocker/o.csv", *rest), 2, (r"blocker",),
           files={"t.csv": TABLE, "blocker": b"a file"}),
        _o("out-sites-new-folders", (*sites_o, "new/deeper/o.csv", *rest), 0, output="new/deeper/o.csv"),
        _o("out-sites-parquet", (*sites_o, "o.parquet", *rest), 0, output="o.parquet"),
        _o("out-attach-is-table", (*ATTACH[:7], "t.csv", *ATTACH[8:], "--force"), 2, ("input", "TABLE"),
           files={"t.csv": LOCATED, "g.nc": grid_bytes()}),
        _o("out-attach-is-grid", ("attach", "t.csv", "--grid", "g.parquet", "--name", "sst", "-o", "g.parquet",
                                  "--force"), 2, ("--grid",), files={"t.csv": LOCATED, "g.parquet": grid_bytes()}),
        _o("out-attach-is-gazetteer", ("attach", "t.csv", "--grid", "g.nc", "--name", "sst", "-o", "g.csv",
                                       "--site", "reef", "--gazetteer", "g.csv", "--period", "when", "--force"),
           2, ("--gazetteer",), files={"t.csv": TABLE, "g.csv": GAZ, "g.nc": grid_bytes()}),
        _o("out-attach-exists", ATTACH, 2, ("--force",),
           files={"t.csv": LOCATED, "g.nc": grid_bytes(), "o.csv": PREVIOUS}),
        _o("out-fit-influence-is-table", (*FIT, "--influence", "t.csv"), 2, (r"'t\.csv'", "input"), files=fit_files),
        _o("out-fit-influence-is-table-force", (*FIT, "--influence", "t.csv", "--force"), 2, ("input",),
           files=fit_files),
        _o("out-fit-influence-symlink", (*FIT, "--influence", "l.csv", "--force"), 2, ("input",), files=fit_files,
           links=(("l.csv", "t.csv"),)),
        _o("out-fit-json-exists", (*FIT, "--json", "f.json"), 2, (r"'f\.json'", "--force"),
           files={**fit_files, "f.json": PREVIOUS}),
        _o("out-fit-json-exists-force", (*FIT, "--json", "f.json", "--force"), 0, files={**fit_files, "f.json": PREVIOUS}),
        _o("out-fit-influence-exists", (*FIT, "--influence", "i.csv"), 2, (r"'i\.csv'", "--force"),
           files={**fit_files, "i.csv": PREVIOUS}),
        _o("out-fit-influence-exists-force", (*FIT, "--influence", "i.csv", "--force"), 0,
           files={**fit_files, "i.csv": PREVIOUS}, output="i.csv", table=""),
        _o("out-fit-json-folder", (*FIT, "--json", "d"), 2, (r"'d'",), files={**fit_files, "d/keep": b""}),
        _o("out-fit-json-extension", (*FIT, "--json", "f.txt"), 2, (r"'\.txt'",), files=fit_files),
        _o("out-run-export-is-studies", ("run", "p.toml", "--out", ".", "--force", "--no-progress"), 2,
           ("studies.path", "input"), files={**run_files, "p.toml": _project("studies")}),
        _o("out-run-exists", ("run", "p.toml", "--out", "out", "--no-progress"), 2, ("--force",),
           files={**run_files, "out/fit.json": PREVIOUS}),
        _o("out-run-exists-force", ("run", "p.toml", "--out", "out", "--force", "--no-progress"), 0,
           files={**run_files, "out/fit.json": PREVIOUS}, output="out/enriched.csv", table="studies.csv"),
        _o("out-run-out-is-a-file", ("run", "p.toml", "--out", "studies.csv", "--no-progress"), 2,
           (r"studies\.csv",), files=run_files),
        _o("out-demo-exists", ("demo", "--out", "d", "--no-progress"), 2, ("--force",),
           files={"d/fit.json": PREVIOUS}),
        _o("out-demo-out-is-a-file", ("demo", "--out", "d", "--no-progress"), 2, ("d' is a file",),
           files={"d": PREVIOUS}),
    ]
    return c


#: a located table with effects: one month of 2000 at each of the grid's cells
IMPUTE_TABLE = csv_bytes(
    ("id", "site_lat", "site_lon", "period_start", "period_end", "locate_status", "period_precision",
     "locate_flags", "es", "es_var"),
    [[str(i), f"{0.5 + i % 3:.1f}", f"{10.5 + i % 2:.1f}", f"2000-{i + 1:02d}-01", f"2000-{i + 1:02d}-28", "ok",
      "month", "", f"{0.1 * i:.2f}", "0.05"] for i in range(8)])


def _signals() -> tuple[tuple[str, int], ...]:
    return tuple((s.name, int(s)) for s in (signal.SIGINT, signal.SIGTERM, getattr(signal, "SIGHUP", None)) if s)


def interrupts() -> list[Case]:
    """Each command stopped by each signal while a temporary file exists: nothing partial is left."""
    runs: dict[str, tuple[tuple[str, ...], dict[str, bytes], str, tuple[str, ...]]] = {
        "sites": ((*SITES, "--force"), {"t.csv": TABLE, "o.csv": PREVIOUS}, "o.csv", ("o.csv",)),
        "attach": ((*ATTACH[:8], "--force"), {"t.csv": LOCATED, "g.nc": grid_bytes(), "o.csv": PREVIOUS},
                   "o.csv", ("o.csv",)),
        "fit": ((*FIT, "--json", "f.json", "--influence", "i.csv", "--force"),
                {"t.csv": FIT_TABLE, "f.json": PREVIOUS, "i.csv": PREVIOUS}, "i.csv", ("f.json", "i.csv")),
        "run": (("run", "p.toml", "--out", "out", "--force", "--no-progress"),
                {"studies.csv": STUDIES, "p.toml": _project(), "out/enriched.csv": PREVIOUS,
                 "out/fit.json": PREVIOUS}, "enriched.csv", ("out/enriched.csv", "out/fit.json")),
        "effects": (("effects", "t.csv", "--kind", "logit_proportion", "--events", "k", "--total", "n",
                     "-o", "o.csv", "--force"),
                    {"t.csv": csv_bytes(("k", "n"), [["3", "10"], ["5", "12"]]), "o.csv": PREVIOUS},
                    "o.csv", ("o.csv",)),
        "report": (("report", "t.csv", "--effect", "es", "--variance", "es_var", "-o", "r.html", "--force"),
                   {"t.csv": FIT_TABLE, "r.html": PREVIOUS}, "r.html", ("r.html",)),
        "impute": (("impute", "t.csv", "--grid", "g.nc", "--covariate", "sst=mean", "--effect", "es",
                    "--variance", "es_var", "--moderators", "sst", "--draws", "2", "--seed", "1",
                    "--no-cache", "--no-progress", "--json", "o.json", "--force"),
                   {"t.csv": IMPUTE_TABLE, "g.nc": grid_bytes(), "o.json": PREVIOUS}, "o.json", ("o.json",)),
        "demo": (("demo", "--out", "d", "--force", "--no-progress"),
                 {"d/enriched.csv": PREVIOUS, "d/report.html": PREVIOUS}, ".cells",
                 ("d/enriched.csv", "d/report.html")),
    }
    cases = []
    for command, (argv, files, pause, _previous) in runs.items():
        for name, number in _signals():
            cases.append(Case(f"interrupt-{command}-{name}", "interrupts", argv, tuple(files.items()),
                              128 + number, ("stopped by " + name,), unchanged=tuple(files), kind="signal",
                              signal=number, pause=pause, outcome="stopped: 128 + N, outputs intact"))
    grid_project = _project(extra='\n[grids.sst]\npath = "g.nc"\n\n[[covariates]]\nname = "sst_mean"\n'
                                  'grid = "sst"\n')
    studies = csv_bytes(("study", "lat", "lon", "when", "r", "n", "my x", "depth.m"),
                        [[f"S{i}", f"{0.6 + i / 5:.2f}", f"{10.6 + i / 10:.2f}", f"March {2000 + i % 2}",
                          f"{0.1 + 0.05 * i:.2f}", str(30 + 5 * i), f"{i},5", f"{i}.5"] for i in range(8)])
    for command, argv, files, output in (
            ("attach", ATTACH[:8], {"t.csv": LOCATED, "g.nc": grid_bytes()}, "o.csv"),
            ("sites", SITES, {"t.csv": TABLE}, "o.csv"),
            ("run", ("run", "p.toml", "--out", "out", "--no-progress"),
             {"studies.csv": studies, "p.toml": grid_project, "g.nc": grid_bytes()}, "out/enriched.csv")):
        cases.append(Case(f"rerun-{command}-after-SIGTERM", "interrupts", argv, tuple(files.items()), 0,
                          output=output, kind="rerun", signal=int(signal.SIGTERM),
                          pause=output.rsplit("/", 1)[-1], outcome="rerun byte-identical"))
    return cases


HOSTILE = ("<script>alert(1)</script>", '"><img src=x onerror=alert(1)>', "$x^2$ and $\\frac{1}{0}$",
           "back\\slash \\n \\begin{x}", "$", "a & b &amp; <b>bold</b>", "</table></html><!--", "{{ x }} %s %(x)s",
           "\u202eright-to-left", "under_score^hat~tilde#hash", "50% of $10", "line\nbreak\ttab")


def report_escaping() -> list[Case]:
    """User strings in every place of the HTML report: title, columns, levels, flags, notes, grid attributes."""
    cases = [Case(f"report-hostile-{n}", "report escaping", (text,), kind="report", outcome="escaped, figures drawn")
             for n, text in enumerate(HOSTILE)]
    for n in (0, 2, 3):  # the same with LaTeX asked for in the user's matplotlib settings
        cases.append(Case(f"report-hostile-usetex-{n}", "report escaping", (HOSTILE[n], "usetex"), kind="report",
                          outcome="escaped, figures drawn"))
    return cases

