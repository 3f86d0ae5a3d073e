"""Corpus cases of grids (``envlink attach``), fits (``envlink fit``) and project files (``envlink run``).

The grid is :func:`badinput.corpus.grid_bytes`: value = 6 x month index + 2 x lat
index + lon index, so the site at (1.2 N, 10.7 E) in March 2000 reads the cell
(1.5 N, 10.5 E) = 6 x 2 + 2 x 1 + 0 = 14 degC (nearest cell by great-circle distance,
common practice).
"""

from __future__ import annotations

import random

from badinput.corpus import Case, csv_bytes, grid_bytes

LOCATED = csv_bytes(("id", "site_lat", "site_lon", "period_start", "period_end", "locate_status"),
                    [["1", "1.2", "10.7", "2000-03-01", "2000-03-31", "ok"],
                     ["2", "9.0", "10.7", "2000-03-01", "2000-03-31", "ok"],
                     ["3", "", "", "2000-01-01", "2000-01-31", "rejected"],
                     ["4", "1.2", "10.7", "1990-01-01", "1990-01-31", "ok"]])
ATTACH = ("attach", "t.csv", "--grid", "g.nc", "--name", "sst", "-o", "o.csv", "--no-cache")
FLAGS = ("sst_flags", ("", "~outside_grid", "~site_rejected", "~outside_grid_time"))


def _g(id: str, rc: int = 0, messages: tuple[str, ...] = (), *, grid: bytes | None = None,
       extra: tuple[str, ...] = (), rows: tuple = (), files: dict[str, bytes] | None = None,
       argv: tuple[str, ...] = ATTACH) -> Case:
    f = {"t.csv": LOCATED, "g.nc": grid_bytes() if grid is None else grid, **(files or {})}
    return Case(id, "grids", (*argv, *extra), tuple(f.items()), rc, messages, table="t.csv",
                output="o.csv", rows=rows, unchanged=tuple(f))


def grids() -> list[Case]:
    """Grid files that are no grid, grids with odd content, and options that do not fit them."""
    rng = random.Random(5)
    c = [
        _g("grid-plain", rows=(("sst", ("=14", "", "", "")), FLAGS)),
        _g("grid-kelvin", grid=grid_bytes("kelvin"), rows=(("sst", ("=14", "", "", "")),)),
        _g("grid-all-missing", grid=grid_bytes("nan"), rows=(("sst", ("", "", "", "")),
                                                            ("sst_flags", ("~cell_on_land", "~outside_grid",
                                                                           "~site_rejected", "~.")))),
        _g("grid-text-file", 2, (r"'g\.nc'",), grid=b"this is not a grid\n"),
        _g("grid-empty-file", 2, (r"'g\.nc'",), grid=b""),
        _g("grid-table-as-grid", 2, (r"'g\.nc'",), grid=LOCATED),
        _g("grid-gzip", 2, (r"'g\.nc'",), grid=b"\x1f\x8b\x08\x00" + bytes(64)),
        _g("grid-missing-file", 2, (r"'nope\.nc'",), extra=(), argv=(*ATTACH[:3], "nope.nc", *ATTACH[4:])),
        _g("grid-glob-matching-nothing", 2, (r"'nothing\*\.nc'",),
           argv=(*ATTACH[:3], "nothing*.nc", *ATTACH[4:])),
        _g("grid-two-variables", 2, ("--var",), grid=grid_bytes("two")),
        _g("grid-wrong-variable", 2, ("'nope'", r"g\.nc"), extra=("--var", "nope")),
        _g("grid-right-variable", grid=grid_bytes("two"), extra=("--var", "air"),
           rows=(("sst", ("=14", "", "", "")),)),
        _g("grid-without-time", 2, (r"'sst'",), grid=grid_bytes("notime")),
        _g("grid-bad-stat", 2, ("--stat", "'meen'"), extra=("--stat", "meen")),
        _g("grid-bad-window", 2, ("--window",), extra=("--window", "lag:x")),
        _g("grid-bad-spatial", 2, ("--spatial",), extra=("--spatial", "nearest-valid:abc")),
        _g("grid-bad-min-coverage", 2, ("--min-coverage",), extra=("--min-coverage", "2")),
        _g("grid-bad-baseline", 2, ("--baseline",), extra=("--baseline", "abc")),
        _g("grid-missing-mmm-file", 2, ("--mmm", "'nope.nc'"), extra=("--stat", "dhw-max", "--mmm", "nope.nc")),
        _g("grid-name-taken", 2, ("'site_lat'", "--name"), argv=(*ATTACH[:5], "site_lat", *ATTACH[6:])),
        _g("grid-table-not-located", 2, ("site_lat",),
           files={"t.csv": csv_bytes(("id", "lat"), [["1", "2"]])}),
        _g("grid-site-lat-not-a-number", 2, ("row 2", "'site_lat'"),
           files={"t.csv": LOCATED.replace(b"9.0,10.7", b"ten,10.7")}),
    ]
    for kind in ("monthly", "classic"):  # a grid file cut short: named, never a traceback
        nc = grid_bytes(kind)
        for n in range(3):
            pos = rng.randint(8, len(nc) - 8)
            c.append(_g(f"grid-truncated-{kind}-{n}", -1, (r"'g\.nc'",), grid=nc[:pos]))
    c.append(_g("grid-classic", grid=grid_bytes("classic"), rows=(("sst", ("=14", "", "", "")), FLAGS)))
    return c


FIT_HEADER = ("study", "es", "es_var", "x", "zone", "xs", "my x", "depth.m", "one", "word x")


def _fit_rows(rng: random.Random) -> list[list[str]]:
    rows = []
    for i in range(10):
        x = rng.uniform(0, 10)
        rows.append([f"S{i // 2}", f"{0.1 + 0.05 * x + rng.gauss(0, 0.05):.4f}", f"{rng.uniform(0.01, 0.05):.4f}",
                     f"{x:.3f}", rng.choice(["reef", "flat"]), f"{x:.2f}".replace(".", ","),
                     f"{x:.2f}".replace(".", ","), f"{x:.3f}", "A", "7,5" if i else "deep"])
    return rows


FIT_TABLE = csv_bytes(FIT_HEADER, _fit_rows(random.Random(11)))


def _f(id: str, rows: list[list[str]], rc: int, messages: tuple[str, ...] = (), extra: tuple[str, ...] = (),
       output: str = "", out_rows: tuple = ()) -> Case:
    return Case(id, "fits", ("fit", "t.csv", "--effect", "es", "--variance", "es_var", *extra),
                (("t.csv", csv_bytes(FIT_HEADER, rows)),), rc, messages, table="t.csv", output=output,
                rows=out_rows, unchanged=("t.csv",))


def fits() -> list[Case]:
    """Invalid values, formulas of every kind, degenerate random effects and bad options."""
    rng = random.Random(11)
    base = _fit_rows(rng)
    c = [_f("fit-plain", base, 0), _f("fit-influence-rows", base, 0, extra=("--influence", "i.csv"),
                                      output="i.csv", out_rows=(("row", tuple(str(i) for i in range(1, 11))),))]
    c[-1] = Case(c[-1].id, "fits", c[-1].argv, c[-1].files, 0, output="i.csv", rows=c[-1].rows,
                 unchanged=("t.csv",))
    grouped = [[*r[:5], f"{float(r[3]):.3f}".replace(".", ","), *r[6:]] for r in base]
    c.append(_f("fit-grouped-commas", grouped, 2, ("'xs'", "row 1\\b", r"C\(xs\)"), extra=("--moderators", "xs")))
    for n, value in enumerate(["0", "-0.01", "inf", "-inf", "1e400", "1e-200", "0.0", "-1e-300"]):
        rows = [r[:] for r in base]
        r = rng.randint(1, 10)
        rows[r - 1][2] = value
        c.append(_f(f"fit-bad-variance-{n}", rows, 2, (f"row {r}\\b", "'es_var'")))
    for n, value in enumerate(["inf", "-inf", "Infinity", "1e308", "-1e308", "1e80", "1e400"]):
        rows = [r[:] for r in base]
        r = rng.randint(1, 10)
        rows[r - 1][1] = value
        c.append(_f(f"fit-bad-effect-{n}", rows, 2, (f"row {r}\\b", "'es'")))
    for n, value in enumerate(["abc", "1.2.3", "12 %"]):
        rows = [r[:] for r in base]
        r = rng.randint(1, 10)
        rows[r - 1][1] = value
        c.append(_f(f"fit-effect-not-a-number-{n}", rows, 2, (f"row {r}\\b", "'es'")))
    for n, value in enumerate(["", "NA", "nan"]):  # missing: left out with a note, not an error
        rows = [r[:] for r in base]
        r = rng.randint(1, 10)
        rows[r - 1][1] = value
        c.append(_f(f"fit-missing-effect-{n}", rows, 0, (f"note: .*row {r}\\b",)))
    formulas = [
        ("I(x.__class__)", 2, ("moderator", r"'I\(x\.__class__\)'")), ("x +", 2, (r"'x \+'",)), ("C(zone", 2, ("'C\\(zone'",)),
        ("es ~ x", 2, ("'es ~ x'",)), ("x | zone", 2, ()), ("C(zone, Treatment('nope'))", 2, ("nope",)),
        ("nope", 2, ("'nope'",)), ("np.nope(x)", 2, ()), ("lambda: 1", 2, ()), ("__import__('os')", 2, ()),
        ("x ** ", 2, ()), ("(x", 2, ()), ("x + + zone", 0, ()), ("`my x`", 0, ()), ("`depth.m`", 0, ()),
        ("xs", 0, ()), ("bs(x, df=3)", 0, ()), ("bs(xs, df=3)", 0, ()), ("C(zone)", 0, ()),
        ("I(x / 0)", 2, ("row 1\\b",)), ("`word x`", 2, ("'word x'", "row 1\\b", r"C\(`word x`\)")),
        ("C(`my x`)", 2, ("k = 10", "p = 10")), ("x + I(2 * x)", 1, (r"I\(2 \* x\)",)), ("one", 0, ()),
        ("C(one)", 0, ()), ("x:zone + x", 0, ()),
    ]
    for n, (formula, rc, messages) in enumerate(formulas):
        c.append(_f(f"fit-formula-{n}", base, rc, messages, extra=("--moderators", formula)))
    c += [
        _f("fit-nested-one-level", base, 2, ("'one'", "--nested"), extra=("--nested", "one")),
        _f("fit-nested-one-row-per-level", [[f"T{i}", *r[1:]] for i, r in enumerate(base)], 2,
           ("'study'", "--nested"), extra=("--nested", "study")),
        _f("fit-nested-ok", base, 0, extra=("--nested", "study")),
        _f("fit-nested-missing-column", base, 2, ("'site'",), extra=("--nested", "site")),
        _f("fit-cluster-missing-column", base, 2, ("'region'",), extra=("--cluster", "region")),
        _f("fit-cluster-ok", base, 0, extra=("--cluster", "study")),
        _f("fit-missing-effect-column", base, 2, ("'nope'",), extra=()),
        _f("fit-level", base, 2, ("--level",), extra=("--level", "1.5")),
        _f("fit-permutations", base, 2, ("--permutations",), extra=("--permutations", "-1")),
        _f("fit-method", base, 2, ("--method",), extra=("--method", "REMLX")),
        _f("fit-test", base, 2, ("--test",), extra=("--test", "tee")),
        _f("fit-tau2", base, 2, ("--tau2",), extra=("--tau2", "-1")),
        # too few usable rows is bad input (TooFewRowsError, docs/methods.md): exit 2
        _f("fit-all-effects-blank", [[r[0], "", *r[2:]] for r in base], 2, ("k = 0",)),
    ]
    c[-7] = Case(c[-7].id, "fits", ("fit", "t.csv", "--effect", "nope", "--variance", "es_var"), c[-7].files, 2,
                 ("'nope'",), table="t.csv", unchanged=("t.csv",))
    return c


STUDIES = csv_bytes(("study", "lat", "lon", "when", "r", "n", "my x", "depth.m"),
                    [[f"S{i}", f"{-9 - i / 10:.2f}", f"{-117 - i / 10:.2f}", f"March {2001 + i}",
                      f"{0.1 + 0.05 * i:.2f}", str(30 + 5 * i), f"{i},5", f"{i}.5"] for i in range(8)])
PROJECT = """[project]
title = "corpus"

[studies]
path = "studies.csv"
study = "study"

[locate]
lat = "lat"
lon = "lon"
period = "when"

[effects]
kind = "fisher_z"

[effects.columns]
r = "r"
n = "n"

[model]
moderators = "MODERATORS"

[export]
formats = ["csv"]
report = false
"""


def _p(id: str, text: str, rc: int, messages: tuple[str, ...] = (), *, moderators: str = "`my x`",
       files: dict[str, bytes] | None = None, extra: tuple[str, ...] = (), encoding: str = "utf-8",
       output: str = "out/enriched.csv") -> Case:
    f = {"studies.csv": STUDIES, "p.toml": text.replace("MODERATORS", moderators).encode(encoding),
         **(files or {})}
    return Case(id, "project files", ("run", "p.toml", "--out", "out", "--no-progress", *extra),
                tuple(f.items()), rc, messages, table="studies.csv", output=output if rc == 0 else "",
                unchanged=tuple(f))


def projects() -> list[Case]:
    """Project files: syntax, keys, values, files, encodings, formulas."""
    c = [
        _p("project-plain", PROJECT, 0),
        _p("project-backtick-text-numbers", PROJECT, 0, moderators="`my x`"),
        _p("project-backtick-dotted-name", PROJECT, 0, moderators="`depth.m`"),
        _p("project-formula-object-attribute", PROJECT, 2, (r"p\.toml", "moderators"),
           moderators="I(lat.__class__)"),
        _p("project-formula-syntax", PROJECT, 2, (r"p\.toml, line \d+", "moderator"), moderators="lat +"),
        _p("project-utf16", PROJECT, 0, encoding="utf-16"),
        _p("project-utf8-bom", "\ufeff" + PROJECT, 0),
        _p("project-cp1252", PROJECT.replace('"corpus"', '"Récif"'), 2, (r"p\.toml", "line 2", "UTF-8"),
           encoding="cp1252"),
        _p("project-toml-syntax", PROJECT.replace('[locate]', '[locate'), 2, (r"p\.toml", "line")),
        _p("project-unknown-section", PROJECT + "\n[extras]\na = 1\n", 2, (r"p\.toml, line \d+", "extras")),
        _p("project-unknown-key", PROJECT.replace('lon = "lon"', 'lon = "lon"\nlongitude = 3'), 2,
           (r"p\.toml, line 11", "longitude")),
        _p("project-bad-method", PROJECT.replace('[model]', '[model]\nmethod = "REMLX"'), 2,
           (r"p\.toml, line \d+", "'model.method'", "'REMLX'")),
        _p("project-bad-kind", PROJECT.replace('"fisher_z"', '"fisher_zz"'), 2, (r"p\.toml, line 14", "kind")),
        _p("project-missing-studies", PROJECT.replace('"studies.csv"', '"nope.csv"'), 2,
           (r"p\.toml, line 5", "studies.path", "nope.csv")),
        _p("project-missing-column", PROJECT.replace('lat = "lat"', 'lat = "latitude"'), 2,
           (r"p\.toml, line 9", "'locate.lat'", "'latitude'")),
        _p("project-missing-effect-role", PROJECT.replace('n = "n"\n', ''), 2, (r"p\.toml, line 16", "n")),
        _p("project-nested-one-level", PROJECT.replace('[model]', '[model]\nnested = "lat"').replace(
            "MODERATORS", "").replace('moderators = ""\n', ''), 2, (r"p\.toml", "'lat'")),
        _p("project-word-in-number-column", PROJECT, 2, (r"p\.toml", "row 3", r"C\(`my x`\)"),
           files={"studies.csv": STUDIES.replace(b'"2,5"', b"deep")}),
        _p("project-grid-not-a-grid", PROJECT + '\n[grids.sst]\npath = "sst.nc"\n\n[[covariates]]\n'
           'name = "sst_mean"\ngrid = "sst"\n', 2, (r"p\.toml, line \d+", r"grids\.sst", r"sst\.nc"),
           files={"sst.nc": b"not a grid\n"}),
        _p("project-grid-missing", PROJECT + '\n[grids.sst]\npath = "sst.nc"\n\n[[covariates]]\n'
           'name = "sst_mean"\ngrid = "sst"\n', 2, (r"p\.toml, line \d+", r"sst\.nc")),
        _p("project-is-a-table", PROJECT, 2, (r"studies\.csv",), extra=()),
        _p("project-studies-utf16", PROJECT, 0, files={"studies.csv": STUDIES.decode().encode("utf-16")}),
        _p("project-studies-binary", PROJECT, 2, (r"studies\.csv", "not a text table"),
           files={"studies.csv": b"PAR1" + bytes(20)}),
    ]
    c[-3] = Case(c[-3].id, "project files", ("run", "studies.csv", "--out", "out"), c[-3].files, 2,
                 c[-3].messages, unchanged=("studies.csv",))
    return c
