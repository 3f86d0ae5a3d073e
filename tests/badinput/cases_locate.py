"""Corpus cases of the locate side: tables (encodings, headers, shapes), coordinates, dates, gazetteers.

Expected coordinates and dates are computed here from the generated parts (degrees,
minutes and seconds; year, month and day with :mod:`calendar`), independently of
envlink's parsers; QA codes are those listed in docs/locate.md.
"""

from __future__ import annotations

import calendar
import functools
import random

from badinput.corpus import Case, csv_bytes

SITES = ("sites", "t.csv", "-o", "o.csv", "--lat", "lat", "--lon", "lon", "--period", "when")
HEADER = ("id", "reef", "lat", "lon", "when")
ROWS = (("1", "Récif Nord", "-8.5", "160.25", "2001-03"),
        ("2", "Île Sud", "-9.25", "161.5", "March 2002"),
        ("3", "Ærø Bank", "-10", "162", "2003"))
NAMES = tuple(r[1] for r in ROWS)


def _t(id: str, files: dict[str, bytes], rc: int = 0, messages: tuple[str, ...] = (),
       argv: tuple[str, ...] = SITES, rows: tuple = (), category: str = "tables") -> Case:
    return Case(id, category, argv, tuple(files.items()), rc, messages, table="t.csv",
                output="o.csv" if "o.csv" in argv else "", rows=rows, unchanged=tuple(files))


def _encodings() -> list[Case]:
    cases = []
    text = csv_bytes(HEADER, ROWS).decode()
    forms = {"utf8": text.encode(), "utf8-bom": b"\xef\xbb\xbf" + text.encode(),
             "utf16": text.encode("utf-16"), "utf16-le": text.encode("utf-16-le"),
             "utf16-be": text.encode("utf-16-be"), "utf16-be-bom": b"\xfe\xff" + text.encode("utf-16-be"),
             "utf32": text.encode("utf-32"), "utf32-le": text.encode("utf-32-le"),
             "cp1252": text.encode("cp1252"), "latin1": text.encode("latin-1"),
             "crlf": text.replace("\n", "\r\n").encode(), "cr": text.replace("\n", "\r").encode()}
    for name, data in forms.items():
        cases.append(_t(f"table-encoding-{name}", {"t.csv": data},
                        rows=(("reef", NAMES), ("locate_status", ("ok",) * 3))))
    rng = random.Random(13)
    for n in range(6):  # a UTF-8 table with some lines written in Windows-1252 (a merged table)
        legacy = sorted(rng.sample(range(2, 5), rng.randint(1, 2)))
        lines = text.splitlines(keepends=True)
        data = b"".join(line.encode("cp1252" if i + 1 in legacy else "utf-8") for i, line in enumerate(lines))
        if all(i in legacy for i in range(2, 5)):
            continue
        where = ", ".join(map(str, legacy))
        cases.append(_t(f"table-mixed-encodings-{n}", {"t.csv": data},
                        messages=(rf"warning: .*'t\.csv'.*lines? {where} .*Windows-1252",),
                        rows=(("reef", NAMES),)))
    cases.append(_t("table-utf16-odd-bytes", {"t.csv": text.encode("utf-16")[:-1]}, 2,
                    (r"'t\.csv'", "UTF-16")))
    magic = {"xlsx": (b"PK\x03\x04\x14\x00\x00\x00" + bytes(40), "xlsx"),
             "parquet": (b"PAR1\x15\x04" + bytes(40), "Parquet"),
             "netcdf": (b"\x89HDF\r\n\x1a\n" + bytes(40), "netCDF"),
             "gzip": (b"\x1f\x8b\x08\x00" + bytes(40), "gzip"),
             "nul": (text.encode()[:30] + b"\x00" + text.encode()[30:], "not a text table")}
    for name, (data, fragment) in magic.items():
        cases.append(_t(f"table-binary-{name}", {"t.csv": data}, 2, (r"'t\.csv'", fragment)))
    return cases


def _shapes() -> list[Case]:
    rows = [list(r) for r in ROWS]
    c = [
        _t("table-blank-header-cell", {"t.csv": csv_bytes(("id", "", "lat", "lon", "when"), rows)},
           messages=(r"warning: .*column 2 .*'column_2'",), rows=(("column_2", NAMES),)),
        _t("table-blank-header-cells-trailing", {"t.csv": csv_bytes((*HEADER, ""), [[*r, ""] for r in rows])},
           messages=(r"column 6 .*'column_6'",), rows=(("column_6", ("", "", "")),)),
        _t("table-duplicate-header", {"t.csv": csv_bytes(("id", "lat", "lat", "lon", "when"), rows)}, 2,
           (r"'t\.csv'", r"columns 2 and 3", "'lat'")),
        _t("table-empty-file", {"t.csv": b""}, 2, (r"'t\.csv'",)),
        _t("table-blank-lines-only", {"t.csv": b"\n\n  \n"}, 2, (r"'t\.csv'",)),
        _t("table-header-only", {"t.csv": csv_bytes(HEADER, [])}, rows=()),
        _t("table-row-longer-than-header", {"t.csv": csv_bytes(HEADER, [rows[0], [*rows[1], "x"], rows[2]])},
           2, (r"'t\.csv'", "line 3")),
        _t("table-every-row-longer", {"t.csv": csv_bytes(HEADER, [[*r, "x"] for r in rows])}, 2,
           (r"'t\.csv'", "line 2")),
        _t("table-trailing-delimiters", {"t.csv": csv_bytes(HEADER, [[*r, ""] for r in rows])},
           rows=(("id", ("1", "2", "3")), ("reef", NAMES))),
        _t("table-short-row", {"t.csv": b"id,reef,lat,lon,when\n1,A,-8.5,160.25\n"},
           rows=(("locate_status", ("flagged",)), ("locate_flags", ("~period_missing",)))),
        _t("table-unclosed-quote", {"t.csv": b'id,reef,lat,lon,when\n1,"A,-8.5,160.25,2001\n2,B,1,1,2001\n'},
           2, (r"'t\.csv'", "line 2")),
        _t("table-semicolons-decimal-commas",
           {"t.csv": csv_bytes(HEADER, [[r[0], r[1], r[2].replace(".", ","), r[3].replace(".", ","), r[4]]
                                        for r in rows], sep=";")},
           rows=(("site_lat", ("=-8.5", "=-9.25", "=-10")), ("site_lon", ("=160.25", "=161.5", "=162")))),
        _t("table-comma-decimal-commas-unquoted", {"t.csv": b"id,reef,lat,lon,when\n1,A,-8,5,160,25,2001\n"},
           2, (r"'t\.csv'", "line 2")),
        _t("table-invisible-characters", {"t.csv": csv_bytes(HEADER, [["1", "A", "-8.5\u200b", "\u2060160.25",
                                                                        "2001-03\ufeff"]])},
           rows=(("site_lat", ("=-8.5",)), ("locate_status", ("ok",)))),
        _t("table-unknown-extension", {"t.dat": csv_bytes(HEADER, rows)}, 2, (r"'t\.dat'", r"'\.dat'"),
           argv=("sites", "t.dat", "-o", "o.csv", "--lat", "lat", "--lon", "lon")),
        _t("table-missing-file", {}, 2, (r"'t\.csv'",)),
        _t("table-is-a-folder", {"t.csv/x": b"x"}, 2, (r"'t\.csv'",)),
        _t("table-missing-column", {"t.csv": csv_bytes(HEADER, rows)}, 2, ("'latitude'",),
           argv=("sites", "t.csv", "-o", "o.csv", "--lat", "latitude", "--lon", "lon")),
        _t("table-text-as-xlsx", {"t.xlsx": csv_bytes(HEADER, rows)}, 2, (r"'t\.xlsx'", "Excel"),
           argv=("sites", "t.xlsx", "-o", "o.csv", "--lat", "lat", "--lon", "lon")),
        _t("table-text-as-parquet", {"t.parquet": csv_bytes(HEADER, rows)}, 2, (r"'t\.parquet'", "Parquet"),
           argv=("sites", "t.parquet", "-o", "o.csv", "--lat", "lat", "--lon", "lon")),
        _t("table-xlsx-output-long-cell", {"t.csv": csv_bytes((*HEADER, "notes"), [[*rows[0], "x" * 40000]])},
           2, (r"row 1", "'notes'", "32,767"), argv=(*SITES[:3], "o.xlsx", *SITES[4:])),
        _t("table-xlsx-output-control-character",
           {"t.csv": csv_bytes((*HEADER, "notes"), [[*rows[0], "bell\x07"]])},
           2, (r"row 1", "'notes'", "U\\+0007"), argv=(*SITES[:3], "o.xlsx", *SITES[4:])),
        _t("table-long-cell-csv-output", {"t.csv": csv_bytes((*HEADER, "notes"), [[*rows[0], "x" * 40000]])},
           rows=(("notes", ("x" * 40000,)),)),
        _t("table-quoted-newline-in-cell", {"t.csv": csv_bytes(HEADER, [["1", "two\nlines", "-8.5", "160.25",
                                                                          "2001"]])},
           rows=(("reef", ("two\nlines",)), ("locate_status", ("ok",)))),
    ]
    return c


def tables() -> list[Case]:
    """Encodings, header cells and shapes of the studies table (``envlink sites``)."""
    return _encodings() + _shapes()


def _one(id: str, lat: str, lon: str, expect: tuple, category: str = "coordinates",
         argv: tuple[str, ...] = SITES, value: str = "2001") -> Case:
    """A two-row table: the case's row, then a plain row that must stay as it is."""
    header = ("id", "lat", "lon", "when")
    plain = ["2", "-8.5, 160.25", "", "2001"] if "--coords" in argv else ["2", "-8.5", "160.25", "2001"]
    rows = [["1", lat, lon, value], plain]
    return Case(id, category, argv, (("t.csv", csv_bytes(header, rows)),), 0, table="t.csv",
                output="o.csv", rows=expect, unchanged=("t.csv",))


def _dms(rng: random.Random, limit: int) -> tuple[int, int, int, str, float]:
    d, m, s = rng.randint(0, limit - 1), rng.randint(0, 59), rng.randint(0, 59)
    return d, m, s, "", d + m / 60 + s / 3600


def coordinates() -> list[Case]:
    """Coordinate cells in many forms, valid and not (``envlink sites --lat/--lon``, ``--coords``)."""
    rng = random.Random(2024)
    cases: list[Case] = []
    for n in range(20):  # degrees, minutes, seconds with hemisphere letters
        d, m, s, _, lat = _dms(rng, 90)
        e, n2, t, _, lon = _dms(rng, 180)
        ns, ew = rng.choice("NS"), rng.choice("EW")
        form = rng.choice(["{d}°{m}'{s}\"{h}", "{d} {m} {s} {h}", "{h} {d}°{m}′{s}″"])
        cases.append(_one(f"coord-dms-{n}", form.format(d=d, m=m, s=s, h=ns), form.format(d=e, m=n2, s=t, h=ew),
                          (("site_lat", (f"={lat if ns == 'N' else -lat!r}", "=-8.5")),
                           ("site_lon", (f"={lon if ew == 'E' else -lon!r}", "=160.25")),
                           ("locate_status", ("ok", "ok")))))
    for n in range(8):  # decimals, decimal commas, unicode minus
        lat, lon = round(rng.uniform(-89, 89), 4), round(rng.uniform(-179, 179), 4)
        lat_text, lon_text = str(lat), str(lon)
        if n % 3 == 1:
            lat_text, lon_text = lat_text.replace(".", ","), lon_text.replace(".", ",")
        if n % 3 == 2:
            lat_text, lon_text = lat_text.replace("-", "\u2212"), lon_text.replace("-", "\u2212")
        cases.append(_one(f"coord-decimal-{n}", lat_text, lon_text,
                          (("site_lat", (f"={lat!r}", "=-8.5")), ("site_lon", (f"={lon!r}", "=160.25")))))
    for n in range(5):  # longitude first: swapped and flagged (|first| > 90, |second| <= 90)
        lat, lon = round(rng.uniform(-89, 89), 3), round(rng.choice([-1, 1]) * rng.uniform(91, 179), 3)
        cases.append(_one(f"coord-swapped-{n}", str(lon), str(lat),
                          (("site_lat", (f"={lat!r}", "=-8.5")), ("locate_flags", ("~swapped_lat_lon", "")),
                           ("locate_status", ("flagged", "ok")))))
    for n in range(5):  # 0-360 longitudes
        lat, lon = round(rng.uniform(-89, 89), 3), round(rng.uniform(180.5, 359), 3)
        cases.append(_one(f"coord-lon-0-360-{n}", str(lat), str(lon),
                          (("site_lon", (f"={lon - 360!r}", "=160.25")), ("locate_flags", ("~lon_0_360", "")))))
    bad = [("lat_out_of_range", lambda: (str(round(rng.uniform(90.5, 99), 2)), str(round(rng.uniform(91, 179), 2)))),
           ("lat_out_of_range", lambda: (f"{rng.randint(91, 150)}°N", "10°E")),
           ("lon_out_of_range", lambda: ("10", str(rng.randint(361, 999)))),
           ("lon_out_of_range", lambda: ("10 N", f"{rng.randint(181, 359)} E")),
           ("minutes_ge_60", lambda: (f"{rng.randint(1, 80)}°{rng.randint(60, 99)}'S", "10")),
           ("seconds_ge_60", lambda: (f"{rng.randint(1, 80)}°10'{rng.randint(60, 99)}\"S", "10")),
           ("negative_minutes", lambda: (f"{rng.randint(1, 80)} -{rng.randint(1, 59)}", "10")),
           ("sign_contradicts_hemisphere", lambda: (f"-{rng.randint(1, 80)} N", "10")),
           ("wrong_axis_letter", lambda: (f"{rng.randint(1, 80)} E", "10 E")),
           ("swapped_lat_lon_suggested", lambda: (f"{rng.randint(1, 80)} E", f"{rng.randint(1, 80)} N")),
           ("unreadable_coordinate", lambda: (rng.choice(["abc", "12°x", "N/A?", "1.2.3", "--"]), "10"))]
    for n in range(22):
        code, make = bad[n % len(bad)]
        lat, lon = make()
        cases.append(_one(f"coord-bad-{code}-{n}", lat, lon,
                          (("locate_status", ("rejected", "ok")), ("locate_flags", (f"~{code}", "")),
                           ("locate_notes", ("~'lat|lon'", "")))))
    coords_argv = ("sites", "t.csv", "-o", "o.csv", "--coords", "lat", "--period", "when")
    for n, (text, expect) in enumerate([
        ("12°30'S 117°10'E", (-12.5, 117 + 10 / 60)), ("-12.5, 117.2", (-12.5, 117.2)),
        ("12.5S 117.2W", (-12.5, -117.2)), ("+12.5-117.2/", (12.5, -117.2)),
        ("POINT (117.2 -12.5)", (-12.5, 117.2)), ("12 30 S 117 10 E", (-12.5, 117 + 10 / 60))]):
        cases.append(_one(f"coord-one-cell-{n}", text, "", (("site_lat", (f"={expect[0]!r}", "=-8.5")),
                                                            ("site_lon", (f"={expect[1]!r}", "=160.25"))),
                          argv=coords_argv))
    for n, (text, code) in enumerate([("12.5", "one_coordinate_only"), ("1 2 3 4", "ambiguous_coordinate"),
                                      ("north of the reef", "unreadable_coordinate")]):
        cases.append(_one(f"coord-one-cell-bad-{n}", text, "", (("locate_status", ("rejected", "ok")),
                                                                ("locate_flags", (f"~{code}", ""))),
                          argv=coords_argv))
    cases.append(_one("coord-blank", "", "", (("locate_status", ("rejected", "ok")),
                                              ("locate_flags", ("~site_missing", "")))))
    cases.append(_one("coord-lat-only", "-8.5", "", (("locate_status", ("rejected", "ok")),
                                                     ("locate_flags", ("~lon_missing", "")))))
    return cases


def _period(id: str, text: str, expect: tuple, argv: tuple[str, ...] = SITES) -> Case:
    return _one(id, "-8.5", "160.25", expect, category="dates", argv=argv, value=text)


def dates() -> list[Case]:
    """Period cells: ISO dates, month names, impossible dates, orders, seasons, missing markers."""
    rng = random.Random(7)
    months = list(calendar.month_name)[1:]
    cases: list[Case] = []
    for n in range(10):
        y, m = rng.randint(1950, 2030), rng.randint(1, 12)
        d = rng.randint(1, calendar.monthrange(y, m)[1])
        iso = f"{y:04d}-{m:02d}-{d:02d}"
        cases.append(_period(f"date-iso-day-{n}", iso, (("period_start", (iso, "2001-01-01")),
                                                        ("period_end", (iso, "2001-12-31")),
                                                        ("period_precision", ("day", "year")))))
    for n in range(8):
        y, m = rng.randint(1950, 2030), rng.randint(1, 12)
        last = calendar.monthrange(y, m)[1]
        text = rng.choice([f"{months[m - 1]} {y}", f"{y}-{m:02d}", f"{months[m - 1][:3]} {y}"])
        cases.append(_period(f"date-month-{n}", text, (("period_start", (f"{y:04d}-{m:02d}-01", "2001-01-01")),
                                                       ("period_end", (f"{y:04d}-{m:02d}-{last:02d}",
                                                                       "2001-12-31")))))
    impossible = []
    for _ in range(4):
        impossible.append(f"{rng.randint(1950, 2030)}-{rng.randint(13, 19)}")
    for _ in range(5):
        y, m = rng.randint(1950, 2030), rng.randint(1, 12)
        impossible.append(f"{y}-{m:02d}-{calendar.monthrange(y, m)[1] + rng.randint(1, 3)}")
    for y in (1900, 2011, 2023):  # not leap years (1900: a century not divisible by 400)
        impossible.append(f"{y}-02-29")
    for n, text in enumerate(impossible):
        cases.append(_period(f"date-impossible-{n}", text, (("locate_status", ("rejected", "ok")),
                                                            ("locate_flags", ("~impossible_date", "")))))
    for n in range(3):
        y = rng.randint(1990, 2020)
        cases.append(_period(f"date-end-before-start-{n}", f"{y}-05-01/{y}-04-01",
                             (("locate_flags", ("~end_before_start", "")),)))
    for n in range(3):
        a, b = rng.randint(1, 12), rng.randint(1, 12)
        if a == b:
            b = a % 12 + 1
        y = rng.randint(1990, 2020)
        text = f"{a:02d}/{b:02d}/{y}"
        cases.append(_period(f"date-ambiguous-order-{n}", text, (("locate_status", ("flagged", "ok")),
                                                                 ("locate_flags", ("~ambiguous_day_month", "")),
                                                                 ("period_start", ("", "2001-01-01")))))
        cases.append(_period(f"date-dayfirst-{n}", text, (("period_start", (f"{y}-{b:02d}-{a:02d}", "2001-01-01")),),
                             argv=(*SITES, "--dayfirst")))
    for n, text in enumerate(["n.d.", "unknown", "NA", "", "  "]):
        cases.append(_period(f"date-missing-marker-{n}", text, (("locate_status", ("flagged", "ok")),
                                                                ("locate_flags", ("~period_missing", "")))))
    for n, (text, code) in enumerate([("abc", "unreadable_period"), ("1e5", "unreadable_period"),
                                      ("wet 2011", "season_needs_mapping"), ("summer 2011", "ambiguous_season"),
                                      ("mid-2014", "vague_qualifier"), ("2011/12", "split_year")]):
        cases.append(_period(f"date-form-{n}", text, (("locate_flags", (f"~{code}", "")),)))
    return cases


@functools.cache
def _gpkg(kind: str) -> bytes:
    """A GeoPackage gazetteer written by geopandas (bytes), with one odd place."""
    import tempfile
    from pathlib import Path

    import geopandas as gpd
    import shapely

    good = shapely.box(160.0, -9.0, 161.0, -8.0)
    odd = {"bowtie": shapely.Polygon([(162, -8), (163, -9), (163, -8), (162, -9)]),
           "flat": shapely.Polygon([(162, -8), (163, -9), (164, -10)]),
           "repeated": shapely.Polygon([(162, -8), (162, -8), (162, -8)]),
           "line": shapely.LineString([(162, -8), (163, -9)]),
           "point": shapely.Point(162.5, -8.5)}[kind]
    gdf = gpd.GeoDataFrame({"name": ["Good Reef", "Odd Reef"]}, geometry=[good, odd], crs="EPSG:4326")
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "g.gpkg"
        gdf.to_file(path, driver="GPKG", engine="pyogrio")
        return path.read_bytes()


def gazetteers() -> list[Case]:
    """Gazetteers: encodings, missing columns, bad rows, degenerate polygons, names that do not match."""
    argv = ("sites", "t.csv", "-o", "o.csv", "--site", "reef", "--gazetteer", "g.csv", "--period", "when")
    gpkg_argv = (*argv[:7], "g.gpkg", *argv[8:])
    table = csv_bytes(("reef", "when"), [["Récif Nord", "2001"], ["Île Sud", "2001"]])
    gaz = csv_bytes(("name", "lat", "lon"), [["Récif Nord", "-8.5", "160.25"], ["Île Sud", "-9.25", "161.5"]])
    ok = (("site_lat", ("=-8.5", "=-9.25")), ("locate_status", ("ok", "ok")))

    def case(id: str, files: dict[str, bytes], rc: int = 0, messages: tuple[str, ...] = (),
             rows: tuple = (), args: tuple[str, ...] = argv) -> Case:
        return Case(id, "gazetteers", args, tuple({"t.csv": table, **files}.items()), rc, messages,
                    table="t.csv", output="o.csv", rows=rows, unchanged=("t.csv", *files))

    text = gaz.decode()
    c = [case(f"gazetteer-encoding-{name}", {"g.csv": data}, rows=ok) for name, data in
         {"utf8": gaz, "utf16": text.encode("utf-16"), "cp1252": text.encode("cp1252"),
          "utf8-bom": b"\xef\xbb\xbf" + gaz}.items()]
    mixed = text.splitlines(keepends=True)
    c.append(case("gazetteer-mixed-encodings", {"g.csv": (mixed[0] + mixed[1]).encode() + mixed[2].encode("cp1252")},
                  messages=(r"warning: .*'g\.csv'.*line 3 .*Windows-1252",), rows=ok))
    c += [
        case("gazetteer-no-name-column", {"g.csv": csv_bytes(("label", "lat", "lon"), [["A", "1", "2"]])}, 2,
             (r"'g\.csv'", "name")),
        case("gazetteer-no-coordinates", {"g.csv": csv_bytes(("name", "depth"), [["A", "1"]])}, 2,
             (r"'g\.csv'",)),
        case("gazetteer-blank-name", {"g.csv": csv_bytes(("name", "lat", "lon"), [["A", "1", "2"], ["", "3", "4"]])},
             2, (r"'g\.csv'", "row 2", "'name'")),
        case("gazetteer-bad-coordinates", {"g.csv": csv_bytes(("name", "lat", "lon"), [["A", "95", "200"]])}, 2,
             (r"'g\.csv'", "row 1", "site 'A'")),
        case("gazetteer-header-only", {"g.csv": csv_bytes(("name", "lat", "lon"), [])}, 2,
             (r"'g\.csv'",)),
        case("gazetteer-missing-file", {}, 2, (r"'g\.csv'",)),
        case("gazetteer-binary", {"g.csv": b"PK\x03\x04" + bytes(30)}, 2, (r"'g\.csv'", "xlsx")),
        case("gazetteer-name-not-found",
             {"g.csv": csv_bytes(("name", "lat", "lon"), [["Récif Nord", "-8.5", "160.25"]])},
             rows=(("locate_status", ("ok", "rejected")), ("locate_flags", ("", "~site_not_found")))),
        case("gazetteer-casefold", {"g.csv": csv_bytes(("name", "lat", "lon"), [["RECIF NORD", "-8.5", "160.25"],
                                                                               ["ile sud", "-9.25", "161.5"]])},
             rows=(("locate_flags", ("~site_name_casefold", "~site_name_casefold")),)),
        case("gazetteer-two-places-one-name",
             {"g.csv": csv_bytes(("name", "lat", "lon"), [["Récif Nord", "-8.5", "160.25"],
                                                           ["Récif Nord", "-7.5", "150"], ["Île Sud", "-9.25", "161.5"]])},
             rows=(("locate_flags", ("~ambiguous_site_name", "")), ("site_lat", ("", "=-9.25")))),
    ]
    gtable = csv_bytes(("reef", "when"), [["Good Reef", "2001"], ["Odd Reef", "2001"]])

    def geo(id: str, kind: str, rc: int = 0, messages: tuple[str, ...] = (), rows: tuple = ()) -> Case:
        return Case(id, "gazetteers", gpkg_argv, (("t.csv", gtable), ("g.gpkg", _gpkg(kind))), rc, messages,
                    table="t.csv", output="o.csv", rows=rows, unchanged=("t.csv", "g.gpkg"))

    c += [
        geo("gazetteer-polygon-bow-tie", "bowtie", rows=(("locate_status", ("ok", "flagged")),
                                                         ("locate_flags", ("", "~polygon_repaired")),
                                                         ("site_wkt", ("~POLYGON", "~MULTIPOLYGON")))),
        geo("gazetteer-polygon-zero-area", "flat", rows=(("locate_status", ("ok", "rejected")),
                                                         ("locate_flags", ("", "~site_polygon_degenerate")),
                                                         ("site_lat", ("=-8.5", "")),
                                                         ("locate_notes", ("", "~no area")))),
        geo("gazetteer-polygon-one-point", "repeated", rows=(("locate_status", ("ok", "rejected")),
                                                             ("locate_flags", ("", "~site_polygon_degenerate")))),
        geo("gazetteer-line-geometry", "line", 2, (r"'g\.gpkg'", "feature 2", "LineString")),
        geo("gazetteer-point-and-polygon", "point", rows=(("site_lat", ("=-8.5", "=-8.5")),
                                                          ("site_lon", ("=160.5", "=162.5")))),
        Case("gazetteer-polygon-precision", "gazetteers", gpkg_argv,
             (("t.csv", gtable), ("g.gpkg", _gpkg("bowtie"))), 0, table="t.csv", output="o.csv",
             rows=(("site_precision_km", ("~^[1-9][0-9]", "~^[1-9][0-9]")),), unchanged=("t.csv",)),
    ]
    return c
