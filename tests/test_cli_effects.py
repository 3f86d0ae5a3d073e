"""``envlink effects``: every kind and its roles from the registry, per row and per group.

Numeric checks: the worked examples of Borenstein, Hedges, Higgins & Rothstein (2009,
chapters 4 and 5; tests/reference/effect_sizes.py, recalled from memory and re-derived
there), and ln(2/3) for 2 events of 5 (logit of a proportion, common practice).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from reference.effect_sizes import BORENSTEIN_CH4_SMD, BORENSTEIN_CH5_BINARY

import envlink
from envlink.cli import main
from envlink.core.registry import Entry
from envlink.effects.core import EffectResult
from envlink.effects.kinds import EFFECT_KINDS


def _write(tmp_path, rows, name="t.csv"):
    path = tmp_path / name
    pd.DataFrame(rows).to_csv(path, index=False)
    return path


def test_two_by_two_and_means_match_the_handbook(tmp_path, capsys):
    ref = BORENSTEIN_CH5_BINARY
    t = _write(tmp_path, {"study": ["a"], "e1": [5], "n1": [100], "e2": [10], "n2": [100]})
    out = tmp_path / "rr.csv"
    assert main(["effects", str(t), "--kind", "Log-Risk-Ratio", "--events1", "e1", "--total1", "n1",
                 "--events2", "e2", "--total2", "n2", "-o", str(out)]) == 0
    got = pd.read_csv(out)
    assert list(got.columns) == ["study", "e1", "n1", "e2", "n2", "effect", "variance", "effect_flags"]
    np.testing.assert_allclose(got["effect"], ref["log_rr"], atol=0.5e-4)
    np.testing.assert_allclose(got["variance"], ref["var_log_rr"], atol=0.5e-4)
    smd = BORENSTEIN_CH4_SMD
    t = _write(tmp_path, {k: [v] for k, v in smd["inputs"].items()}, "m.csv")
    out = tmp_path / "g.csv"
    args = [x for role in ("mean1", "sd1", "n1", "mean2", "sd2", "n2") for x in (f"--{role}", role)]
    assert main(["effects", str(t), "--kind", "hedges_g", *args, "--approximate-j",
                 "--name", "g", "--variance-name", "var_g", "-o", str(out)]) == 0
    got = pd.read_csv(out)
    np.testing.assert_allclose(got["g"], smd["g"], atol=0.5e-4)
    np.testing.assert_allclose(got["var_g"], smd["var_g"], atol=0.5e-4)
    assert "1 of 1 rows with an effect" in capsys.readouterr().err


def test_every_kind_equals_the_api(tmp_path, capsys):
    rng = np.random.default_rng(3)  # invented inputs; the API is the reference here
    n = 6
    data = {"events": [3, 0, 5, 9, 2, 7], "total": [20, 15, 30, 40, 10, 25],
            "events1": [3, 0, 5, 9, 2, 7], "total1": [20, 15, 30, 40, 10, 25],
            "events2": [4, 2, 8, 6, 0, 9], "total2": [22, 18, 28, 35, 12, 30],
            "mean1": rng.uniform(5, 10, n), "sd1": rng.uniform(1, 2, n), "n1": [10, 12, 8, 20, 15, 9],
            "mean2": rng.uniform(5, 10, n), "sd2": rng.uniform(1, 2, n), "n2": [11, 9, 14, 18, 10, 7],
            "r": rng.uniform(-0.8, 0.8, n), "n": [10, 20, 30, 15, 25, 8]}
    t = _write(tmp_path, data)
    table = envlink.read_table(t, as_text=True)
    for entry in EFFECT_KINDS:
        out = tmp_path / f"{entry.name}.csv"
        roles = [x for r in entry.info["roles"] for x in (f"--{r}", r)]
        assert main(["effects", str(t), "--kind", entry.name, *roles, "-o", str(out)]) == 0, entry.name
        direct = envlink.effect_sizes(table, entry.name, **{r: r for r in entry.info["roles"]})
        got = pd.read_csv(out, keep_default_na=False)
        np.testing.assert_allclose(pd.to_numeric(got["effect"]), direct["effect"], rtol=1e-12)
        assert got["effect_flags"].tolist() == direct["effect_flags"].tolist()
    capsys.readouterr()


def test_help_lists_every_kind_with_its_roles(capsys):
    assert main(["effects", "--help"]) == 0
    text = capsys.readouterr().out
    for entry in EFFECT_KINDS:
        line = next(ln for ln in text.splitlines() if ln.strip().startswith(f"{entry.name}:"))
        for role in entry.info["roles"]:
            assert f"--{role} COL" in line
    assert "--group COL" in text and "--outcome" in text


def test_a_toy_kind_reaches_the_command_line(tmp_path, capsys):
    # a kind registered in one place gets its options and its --help line
    def double(a):  # noqa: ANN001, ANN202 - the registry's signature
        a = np.asarray(a, dtype=float)
        return EffectResult(2 * a, np.ones_like(a), np.full(a.shape, "", dtype=object))

    entry = EFFECT_KINDS.add(Entry("twice_toy", "two times the value (a toy kind)", obj=double,
                                   info={"roles": ("value",), "options": (), "groupwise": False}))
    try:
        import importlib

        import envlink.cli
        import envlink.commands.effects as cmd

        importlib.reload(cmd)  # the options are generated from the registry on import
        importlib.reload(envlink.cli)
        t = _write(tmp_path, {"v": [1.5, 2.0]})
        out = tmp_path / "toy.csv"
        assert envlink.cli.main(["effects", str(t), "--kind", "Twice-Toy", "--value", "v",
                                 "-o", str(out)]) == 0
        assert pd.read_csv(out)["effect"].tolist() == [3.0, 4.0]
        assert envlink.cli.main(["effects", "--help"]) == 0
        assert "twice_toy: --value COL" in capsys.readouterr().out
    finally:
        EFFECT_KINDS.remove(entry.name)
        importlib.reload(cmd)


def test_groups_from_raw_records(tmp_path, capsys):
    rec = _write(tmp_path, {"reef": list("aaaaabbb"), "ill": [1, 0, 0, 1, 0, 1, 1, 0]})
    out = tmp_path / "g.csv"
    assert main(["effects", str(rec), "--group", "reef", "--kind", "logit_proportion",
                 "--outcome", "ill", "-o", str(out)]) == 0
    got = pd.read_csv(out)
    assert got["reef"].tolist() == ["a", "b"] and got["events"].tolist() == [2, 2]
    np.testing.assert_allclose(got["effect"], [math.log(2 / 3), math.log(2 / 1)], rtol=1e-12)
    assert "2 of 2 groups with an effect" in capsys.readouterr().err


def test_records_with_an_empty_group_cell_join_the_missing_group(tmp_path, capsys):
    # Checks against the design of envlink/effects/groups.py and docs/methods.md: a record
    # without a group value joins one group flagged missing_group; an empty CSV cell (or
    # one of blanks) is such a record, not a group with a blank name.
    rec = _write(tmp_path, {"reef": ["a", "", "a", " ", "b"], "ill": [1, 0, 0, 1, 1]})
    out = tmp_path / "g.csv"
    assert main(["effects", str(rec), "--group", "reef", "--kind", "logit_proportion",
                 "--outcome", "ill", "-o", str(out)]) == 0
    got = pd.read_csv(out, keep_default_na=False)
    assert got["reef"].tolist() == ["a", "", "b"] and got["n"].tolist() == [2, 2, 1]
    assert got["effect_flags"].str.contains("missing_group").tolist() == [False, True, False]


@pytest.mark.parametrize("argv,message", [
    (["--kind", "logit_proportion", "--events", "e"], "missing --total"),
    (["--kind", "logit_proportion", "--events", "e", "--total", "n", "--r", "e"],
     "--r do not apply to it"),
    (["--kind", "arcsine_proportion", "--events", "e", "--total", "n", "--correction", "0.5"],
     "--correction does not apply to --kind arcsine_proportion"),
    (["--kind", "logit_proportion", "--events", "e", "--total", "n", "--outcome", "e"],
     "--outcome, --x and --y need --group"),
    (["--kind", "log_odds_ratio", "--group", "e", "--outcome", "n"],
     "must be one of 'logit_proportion', 'arcsine_proportion', 'freeman_tukey', 'hedges_g'"),
    (["--kind", "logit_proportion", "--events", "e", "--total", "nn"], "Did you mean 'n'"),
    (["--kind", "logit_proportin", "--events", "e", "--total", "n"], "Did you mean 'logit"),
])
def test_bad_input_is_named(tmp_path, capsys, argv, message):
    t = _write(tmp_path, {"e": [1, 2], "n": [10, 20]})
    rc = main(["effects", str(t), *argv, "-o", str(tmp_path / "o.csv")])
    err = capsys.readouterr().err
    assert rc == 2 and message in err, err
    assert "unexpected error" not in err
