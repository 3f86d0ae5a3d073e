"""tau² estimators and tests: the Python API, ``envlink fit`` and the project file accept and
refuse exactly the same names, and record the same canonical label.

Every name comes from the registries in ``envlink.metareg.vocabulary``; the spelling
policy is that of ``envlink.core.registry`` (any case, ``-`` = ``_``, surrounding white
space ignored). The data are the BCG trials (tests/reference/bcg.py); no numeric
result is checked here, only which names are accepted. A new estimator registered at
run time goes through the same interfaces: tests/test_recipes.py ("Recipe: a tau²
estimator" of docs/architecture.md).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from reference.bcg import table

from envlink.cli import main
from envlink.errors import InputError
from envlink.metareg import MetaRegression
from envlink.metareg.vocabulary import ESTIMATORS, TESTS
from envlink.project import load_project

#: spelling -> canonical label, or None where it is refused
METHODS: dict[str, str | None] = {
    "REML": "REML", "reml": "REML", "Restricted_Maximum_Likelihood": "REML",
    "restricted-maximum-likelihood": "REML", " ml ": "ML", "Maximum_Likelihood": "ML",
    "dl": "DL", "DerSimonian-Laird": "DL", "dersimonian_laird": "DL", "PM": "PM",
    "paule-mandel": "PM", "Hedges": "HE", "he": "HE", "SIDIK_JONKMAN": "SJ", "sj": "SJ",
    "bogus": None, "REMLX": None, "": None, "REML:1": None, "restricted maximum likelihood": None,
    "DerSimonian": None, "fixed": None,
}
TESTS_SPELLED: dict[str, str | None] = {
    "z": "z", "Z": "z", "normal": "z", "knapp-hartung": "knapp-hartung",
    "Knapp_Hartung": "knapp-hartung", " KNAPP-HARTUNG ": "knapp-hartung",
    "hartung-knapp": "knapp-hartung", "kh": None, "t": None, "bogus": None, "": None,
    "knapp hartung": None, "z:1": None,
}


@pytest.fixture(scope="module")
def bcg_csv(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("bcg") / "bcg.csv"
    table().to_csv(path, index=False)
    return path


def _api(option: str, text: str) -> str | None:
    try:
        m = MetaRegression(moderators="latitude_abs", **{option: text}).fit(table(), effect="es",
                                                                   variance="es_var")
    except InputError:
        return None
    return m.method_ if option == "method" else m.to_dict()["coefficients"]["test"]


def _cli(option: str, text: str, csv: Path, out: Path) -> str | None:
    out.unlink(missing_ok=True)
    code = main(["fit", str(csv), "--effect", "es", "--variance", "es_var", "--moderators", "latitude_abs",
                 f"--{option}", text, "--json", str(out)])
    assert code in (0, 2)
    if code == 2:
        return None
    got = json.loads(out.read_text())
    return got["model"]["tau2_method"] if option == "method" else got["coefficients"]["test"]


def _project(option: str, text: str, folder: Path) -> bool:
    (folder / "s.csv").write_text("events,total\n1,10\n")
    toml = folder / "p.toml"
    toml.write_text('[studies]\npath = "s.csv"\n[effects]\nkind = "logit_proportion"\n'
                    f'[model]\n{option} = {json.dumps(text)}\n', encoding="utf-8")
    try:
        load_project(toml)
    except InputError:
        return False
    return True


def _reference(option: str, canonical: str | None) -> str | None:
    """What the JSON records: the estimator's label, or the test's distribution (z or t)."""
    if canonical is None or option == "method":
        return canonical
    return "z" if canonical == "z" else "t"


@pytest.mark.parametrize(("option", "text", "canonical"),
                         [("method", t, c) for t, c in METHODS.items()]
                         + [("test", t, c) for t, c in TESTS_SPELLED.items()])
def test_api_cli_and_project_agree(option: str, text: str, canonical: str | None, bcg_csv: Path,
                                   tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    registry = ESTIMATORS if option == "method" else TESTS
    assert registry.accepts(text) is (canonical is not None)
    if canonical is not None:
        assert registry.parse(text).label() == canonical
    expected = _reference(option, canonical)
    assert _api(option, text) == expected
    assert _cli(option, text, bcg_csv, tmp_path / "fit.json") == expected
    assert _project(option, text, tmp_path) is (canonical is not None)
    err = capsys.readouterr().err
    if canonical is None:
        assert f"argument --{option}: must be " in err and "MetaRegression" not in err


def test_refusal_message_has_did_you_mean() -> None:
    with pytest.raises(InputError, match=r"must be one of 'REML', 'ML', 'DL', 'PM', 'HE', 'SJ'; "
                                         r"got 'REMLX'\. Did you mean 'reml'"):
        MetaRegression(method="REMLX").fit(table(), effect="es", variance="es_var")


def test_help_lists_every_name_and_alias(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["fit", "--help"]) == 0
    text = " ".join(capsys.readouterr().out.split())
    for entry in [*ESTIMATORS, *TESTS]:
        assert entry.name in text
        for alias in entry.aliases:
            assert alias in text


def test_registries_import_without_scipy_or_numba() -> None:
    code = ("import sys, envlink.metareg.vocabulary, envlink.project.schema; "
            "print(sorted(m for m in ('scipy', 'numba') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"
