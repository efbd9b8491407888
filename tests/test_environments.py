"""Same output in every environment: text stored as Arrow or Python strings or objects, any
numpy's last bits; and the environment matrix of .ci/environments.py.

.ci/environments.py runs this file in each of its environments (Python 3.10 and 3.13, the
oldest and newest pandas and numpy, with and without pyarrow) after comparing their builds
of site_example with the reference build byte for byte.
"""
from __future__ import annotations

import contextlib
import hashlib
import importlib.util
import math
import warnings
from pathlib import Path
from typing import Iterator

import numpy as np
import pandas as pd
import pytest

from tests.conftest import EXAMPLE, REPO, build_fixed


def _has(module: str) -> bool:
    return importlib.util.find_spec(module) is not None


def _pandas_version() -> tuple[int, int]:
    major, minor = pd.__version__.split(".")[:2]
    return int(major), int(minor)


def tree(folder: Path) -> dict[str, str]:
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


@contextlib.contextmanager
def strings(kind: str) -> Iterator[None]:
    """Read and compute with text stored as *kind*: 'object', 'pyarrow' or 'python' strings."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # pandas 3 deprecates switching string inference off
        if kind == "object":
            ctx = pd.option_context("future.infer_string", False)
        else:
            ctx = pd.option_context("future.infer_string", True, "mode.string_storage", kind)
        with ctx:
            yield


STORAGES = [
    pytest.param("pyarrow", marks=pytest.mark.skipif(
        not _has("pyarrow"), reason="pyarrow is not installed here (.ci/environments.py runs this test in its "
                                    "pyarrow environments)")),
    pytest.param("python", marks=pytest.mark.skipif(
        _pandas_version() < (2, 3), reason=f"pandas {pd.__version__} has no Python-backed str dtype (2.3+)")),
]


@pytest.fixture(scope="module")
def object_build(tmp_path_factory: pytest.TempPathFactory) -> dict[str, str]:
    if not (EXAMPLE / "programme.yaml").is_file():
        pytest.skip("site_example/programme.yaml does not exist")
    out = tmp_path_factory.mktemp("objects") / "site"
    with strings("object"):
        build_fixed(EXAMPLE, out)
    return tree(out)


@pytest.mark.parametrize("storage", STORAGES)
def test_example_builds_identically_with_string_dtypes(storage: str, object_build: dict[str, str],
                                                       tmp_path: Path) -> None:
    """pandas 3 stores text as 'str' (Arrow-backed with pyarrow): the site is byte-identical."""
    out = tmp_path / "site"
    with strings(storage):
        report = build_fixed(EXAMPLE, out)
    people = report.context.programme.table("people")["person_id"]
    assert pd.api.types.is_string_dtype(people) and people.dtype != object  # the storage took effect
    got = tree(out)
    assert sorted(got) == sorted(object_build)
    assert [k for k in got if got[k] != object_build[k]] == []


# ---------------------------------------------------------------------------------------
# numbers written the same whatever the last bits


def test_chart_data_do_not_depend_on_the_last_bit() -> None:
    import plotly.graph_objects as go

    from generator.pages.base import Chart, Table
    from generator.site import chart_html
    a = 0.93524723317564  # numpy 2.4's and numpy 1.26's value of one ISO 1999 figure
    b = 0.9352472331756401
    assert a != b and math.isclose(a, b, rel_tol=1e-15)

    def html(y: float) -> str:
        fig = go.Figure(go.Bar(x=["ASM 3 kHz"], y=[y]))
        return chart_html(Chart(id="c1", figure=fig, summary="s", table=Table(columns=["x"], rows=[])))
    assert html(a) == html(b)
    assert "0.9352472332" in html(a)


def test_round_floats_keeps_short_values_structure_and_types() -> None:
    from generator.portable import round_floats
    data = {"x": [1.02, 85.0, 3, "a", None, True], "z": np.array([[0.1 + 0.2, 2.5]]),
            "t": (1 / 3,), "ints": np.arange(3), "nan": float("nan")}
    got = round_floats(data)
    assert got["x"] == [1.02, 85.0, 3, "a", None, True]
    assert got["x"][2] is 3 and got["x"][5] is True
    assert isinstance(got["z"], np.ndarray) and got["z"].dtype == np.float64 and got["z"].shape == (1, 2)
    assert got["z"].tolist() == [[0.3, 2.5]]
    assert got["t"] == (0.3333333333,)
    assert got["ints"] is data["ints"]
    assert math.isnan(got["nan"])
    assert data["z"][0, 0] == 0.1 + 0.2  # the input is not modified


# ---------------------------------------------------------------------------------------
# the environment matrix


def _environments_module():
    spec = importlib.util.spec_from_file_location("ci_environments", REPO / ".ci" / "environments.py")
    assert spec and spec.loader
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_oldest_environment_installs_exactly_the_declared_floors() -> None:
    envs = _environments_module()
    declared = envs.declared_dependencies()
    oldest = next(e for e in envs.ENVIRONMENTS if e["name"] == "py310-oldest")
    pins = envs.pins_for(oldest, declared)
    assert pins == [f"pandas=={envs.declared_floor(declared, 'pandas')}",
                    f"numpy=={envs.declared_floor(declared, 'numpy')}"]
    # pip gets both the declared requirement and the pin, so a floor that cannot work fails there
    reqs = envs.requirements_of(oldest, declared)
    assert set(declared) <= set(reqs) and set(pins) <= set(reqs)


def test_declared_floors_are_the_ones_that_work() -> None:
    """numpy 2.0 (numpy.strings, StringDType in the demo writer); pandas 2.2.2 (built for numpy 2)."""
    envs = _environments_module()
    declared = envs.declared_dependencies()
    assert envs.declared_floor(declared, "numpy") == "2.0"
    assert envs.declared_floor(declared, "pandas") == "2.2.2"
    assert hasattr(np, "strings") and hasattr(np.dtypes, "StringDType")


def test_matrix_covers_both_pythons_both_ends_and_pyarrow() -> None:
    envs = _environments_module()
    combos = {(e["python"], bool(e["pins"]), "pyarrow" in e["extra"]) for e in envs.ENVIRONMENTS}
    assert {("3.10", True, False), ("3.13", True, False), ("3.13", False, True), ("3.10", False, True)} <= combos
    assert envs.ORACLE["python"] == "3.13" and envs.ORACLE["extra"] == ["phonometry"]


def test_missing_python_is_a_clear_skip(monkeypatch: pytest.MonkeyPatch) -> None:
    envs = _environments_module()
    monkeypatch.setenv("PYENV_ROOT", "/nonexistent")
    exe, why = envs.find_python("2.9")
    assert exe is None and why.startswith("no Python 2.9 on this machine")
    python, message = envs.setup({"name": "py29", "python": "2.9", "extra": [], "pins": []}, [])
    assert python is None and message.startswith("SKIPPED py29: no Python 2.9")


@pytest.mark.parametrize("storage", STORAGES + ["object"])
@pytest.mark.parametrize("adequacy", [["adequate", "no protector"], ["insufficient", "adequate"]])
def test_protection_actions_with_text_in_any_storage(storage: str, adequacy: list[str]) -> None:
    # with Arrow strings, joining texts with an empty number column failed when nobody needed an action
    # (29 CFR 1910.95(j)(3): the target after a shift is 85 dB; the texts name the level, protector and target)
    from generator import protection as P
    from generator.rules import load_rule_set

    with strings(storage):
        people = pd.DataFrame({"person_id": ["A1", "A2"], "adequacy": adequacy, "after_sts": [True, False],
                               "protected_level": [86.04, 80.0], "target": [85.0, 90.0],
                               "method": ["nrr-50", ""], "protector_id": ["PLUG-1", ""]})
        out = P._actions(people, load_rule_set("osha-1910.95"))
    assert list(out.columns) == P.ACTION_COLUMNS
    if "insufficient" in adequacy:
        assert out["subject"].tolist() == ["A1"]
        assert out["detail"].iloc[0].startswith("estimated 86.0 dB(A) under PLUG-1 (")
        assert "target of 85 dB(A)" in out["detail"].iloc[0]
    else:
        assert out.empty


def test_demo_zero_padding_matches_python() -> None:
    # the demo writer pads ids and decimals on every numpy the project declares (2.0's zfill refuses
    # variable-width text); Python's str.zfill is the oracle
    import random

    from generator.demo import _SD, _zfill

    rng = random.Random(5)
    values = [0, 1, 9, 10, 99999, 100000, 123456789] + [rng.randrange(10 ** rng.randint(1, 9)) for _ in range(300)]
    for width in (1, 2, 5, 8):
        got = _zfill(np.array(values).astype(_SD), width)
        assert [str(v) for v in got.tolist()] == [str(v).zfill(width) for v in values]
    assert _zfill(np.zeros(0, dtype=np.int64).astype(_SD), 5).tolist() == []


@pytest.mark.parametrize("storage", STORAGES + ["object"])
def test_programmes_without_records_build_with_text_in_any_storage(storage: str, tmp_path: Path) -> None:
    # frames without rows hold their columns as objects: pandas 2.3 refused to round them (an internal
    # error on any programme without audiograms), and filling their gaps warned; both must build, silently
    from generator.build import build_site
    from tests.progkit import make_programme

    root = make_programme(tmp_path / "empty", {})
    with strings(storage), warnings.catch_warnings():
        warnings.simplefilter("error", FutureWarning)
        report = build_site(root, tmp_path / "out")
    assert {"hearing", "protection", "index"} <= set(report.pages)
