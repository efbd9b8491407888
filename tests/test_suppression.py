"""Small-cell suppression: no public byte rests on fewer than min_group_size people.

A programme with one large group and one group of a single person, whose figures are
crafted to be distinctive (LAeq 97.37 dB(A), peak 141.3 dB(C), hearing levels 63 and
77 dB HL), is built and exported; every page (chart JSON included) and every export
file is scanned for those figures. The restricted build must show them, so the scan
can fail. Suppression of cells below a threshold is common practice in publishing
statistics about people (e.g. "minimum cell size" rules of health statistics offices).
"""
from __future__ import annotations

import csv
import io
import re
import zipfile
from pathlib import Path

import pandas as pd
import pytest

from generator.privacy import SUPPRESSED, Suppressor
from tests.conftest import FIXED_EPOCH, TEST_KEY, build_fixed, env
from tests.progkit import export_texts, make_programme

HL = ["hl_500", "hl_1000", "hl_2000", "hl_3000", "hl_4000", "hl_6000", "hl_8000"]
MIN = 5
#: figures of the one-person group, as pages (one decimal) and exports (two decimals) print them
SMALL_FIGURES = [re.compile(p) for p in (
    r"97\.37", r"(?<![\w.])97\.4(?![\d])", r"141\.3",
    r"(?<![\w.])63(?:\.0+)?(?![\w.]| Hz)", r"(?<![\w.])77(?:\.0+)?(?![\w.])")]


def _aud(pid: str, date: str, ear: str, kind: str, v: int) -> dict:
    return dict(person_id=pid, date=date, ear=ear, kind=kind, quiet_hours=16, **{h: v for h in HL})


def small_programme(root: Path) -> Path:
    """Six people in BIG (levels 78.3-79.8 dB(A), hearing 10 dB HL), one in SML (97.37 dB(A), 63 then 77 dB HL).

    Only the SML person is tested in 2025, so the "all groups" row of that year rests on one person.
    """
    people = [dict(person_id=f"E10{i}", group="BIG", sex="M", birth_date=f"198{i}-02-0{i}", hire_date="2010-01-01",
                   name=f"Big Person{i}") for i in range(1, 7)]
    people.append(dict(person_id="S777", group="SML", sex="F", birth_date="1979-07-07", hire_date="2010-01-01",
                       name="Quilla Smallgroup"))
    # a person who left before the period does not make SML large enough
    people += [dict(person_id=f"L90{i}", group="SML", sex="M", birth_date="1970", hire_date="2000-01-01",
                    leave_date="2020-06-30") for i in range(1, 6)]
    groups = [dict(group="BIG", name="Big shop"), dict(group="SML", name="Small lab")]
    noise = [dict(measurement_id=f"M{i}", date=f"2025-03-0{i}", kind="personal", person_id=f"E10{i}", group="BIG",
                  duration_h=8, laeq=round(78 + i * 0.3, 1), lcpeak=120) for i in range(1, 7)]
    noise.append(dict(measurement_id="M9", date="2025-03-09", kind="personal", person_id="S777", group="SML",
                      duration_h=8, laeq=97.37, lcpeak=141.3))
    auds = [_aud(f"E10{i}", "2024-02-01", ear, "baseline", 10) for i in range(1, 7) for ear in "LR"]
    auds += [_aud("S777", "2024-02-01", ear, "baseline", 63) for ear in "LR"]
    auds += [_aud("S777", "2025-02-01", ear, "periodic", 77) for ear in "LR"]
    # SML is also assessed task by task (its group level then rests on the tasks), and wears a protector
    tasks = [dict(group="SML", task="Sieve shaking", task_hours=4, laeq=99.61, date="2025-04-01"),
             dict(group="SML", task="Sieve shaking", task_hours=4, laeq=96.12, date="2025-04-02"),
             dict(group="SML", task="Sample prep", task_hours=4, laeq=93.83, date="2025-04-03")]
    protectors = [dict(protector_id="FP1", type="foam_plug", nrr=29, snr=32, h=32, m=29, l=27, name="Foam plug")]
    fits = [dict(person_id=p["person_id"], protector_id="FP1", date="2025-01-10", par=22) for p in people[:6]]
    fits.append(dict(person_id="S777", protector_id="FP1", date="2025-01-10", par=37))
    training = [dict(person_id=p["person_id"], date="2025-01-10", topic="Annual training") for p in people[:7]]
    return make_programme(root, files={"people.csv": people, "groups.csv": groups, "noise.csv": noise,
                                       "audiograms.csv": auds, "tasks.csv": tasks, "protectors.csv": protectors,
                                       "protector_fits.csv": fits, "training.csv": training},
                          config={"privacy": {"min_group_size": MIN}})


def _group_figures(ctx) -> list[re.Pattern[str]]:
    """Return patterns of the small group's computed figures (from a restricted build), as pages and exports print them."""
    g = ctx.results.exposure.groups.set_index("group").loc["SML"]
    # levels only (U of about 3 dB is too common a number to scan for)
    cols = ["lex_8h", "lex_8h_upper", "osha_twa", "niosh_twa"] + \
        [c for c in g.index if c.startswith(("level_", "limit_twa_"))]
    vals = sorted({float(g[c]) for c in cols if pd.notna(g[c]) and abs(float(g[c])) != float("inf")})
    pats = []
    for v in vals:
        for digits in (1, 2):
            pats.append(re.compile(r"(?<![\w.])" + re.escape(f"{v:.{digits}f}") + r"(?![\d])"))
    return pats


def _site_texts(out: Path) -> dict[str, str]:
    return {p.relative_to(out).as_posix(): p.read_text(encoding="utf-8") for p in sorted(out.rglob("*"))
            if p.is_file() and p.suffix in (".html", ".json", ".csv", ".js") and "assets" not in p.parts}


def _hits(texts: dict[str, str], extra: list[re.Pattern[str]] = []) -> list[str]:
    found = []
    for name, text in texts.items():
        for pat in SMALL_FIGURES + extra:
            for m in pat.finditer(text):
                found.append(f"{name}: {text[max(0, m.start() - 80):m.end() + 30]!r}")
    return found


def _export(root: Path, restricted: bool) -> dict[str, bytes]:
    from generator.build import prepare
    from generator.export import export_files
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        return export_files(prepare(root, restricted=restricted))


@pytest.fixture(scope="module")
def small(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return small_programme(tmp_path_factory.mktemp("small") / "prog")


def test_no_public_byte_shows_a_figure_of_the_small_group(small: Path, tmp_path: Path) -> None:
    report = build_fixed(small, tmp_path / "site")
    assert report.context.suppressed_groups == frozenset({"SML"})
    full = build_fixed(small, tmp_path / "restricted", restricted=True).context
    figures = _group_figures(full)
    assert len(figures) >= 6
    texts = _site_texts(tmp_path / "site")
    texts.update({f"export/{k}": v for k, v in export_texts(_export(small, False)).items()})
    assert any(n.endswith("exposure.html") for n in texts) and "export/results.xlsx" in texts
    assert _hits(texts, figures) == []


def test_counts_resting_on_the_one_tested_person_are_suppressed(small: Path, tmp_path: Path) -> None:
    import json
    build_fixed(small, tmp_path / "site")
    tiles = lambda slug: dict((label, value) for value, label in re.findall(  # noqa: E731
        r'<span class="tile-value">([^<]+)</span><span class="tile-label">([^<]+)</span>',
        (tmp_path / "site" / f"{slug}.html").read_text(encoding="utf-8")))
    figs = lambda slug: dict(re.findall(  # noqa: E731
        r'<span class="tile-value" data-figure="([a-z_]+)">([^<]+)</span>',
        (tmp_path / "site" / f"{slug}.html").read_text(encoding="utf-8")))
    index = figs("index")
    # one person tested in the period: shift and recordable counts rest on that person
    assert index["people_with_sts"] == SUPPRESSED and index["recordable_cases"] == SUPPRESSED
    assert index["must_be_enrolled"] == SUPPRESSED
    assert index["in_scope"] == "7"
    hearing = tiles("hearing")
    assert set(hearing.values()) == {SUPPRESSED}
    assert not any(re.search(r"in \d+ (?:person|people)", label) for label in hearing)
    summary = json.loads(_export(small, False)["summary.json"])["summary"]
    assert summary["sts_this_period"] == SUPPRESSED and summary["must_be_enrolled"] == SUPPRESSED
    assert json.loads(_export(small, True)["summary.json"])["summary"]["sts_this_period"] == 1


def test_the_restricted_build_and_export_show_the_small_group(small: Path, tmp_path: Path) -> None:
    # the scan above can fail: the figures are there to be found when nothing is withheld
    build_fixed(small, tmp_path / "site", restricted=True)
    texts = _site_texts(tmp_path / "site")
    texts.update({f"export/{k}": v for k, v in export_texts(_export(small, True)).items()})
    found = "\n".join(_hits(texts))
    for figure in ("97.37", "97.4", "141.3", "63.0", "77.0"):
        assert figure in found, figure


def test_public_exports_withhold_the_small_group(small: Path) -> None:
    files = _export(small, False)
    groups = list(csv.DictReader(io.StringIO(files["group_exposure.csv"].decode())))
    sml = next(r for r in groups if r["group"] == "SML")
    assert all(v == "" for k, v in sml.items() if k != "group"), sml
    big = next(r for r in groups if r["group"] == "BIG")
    assert big["n_people"] == "6" and big["lex_8h"] and big["category_osha-1910.95"]
    actions = list(csv.DictReader(io.StringIO(files["actions.csv"].decode())))
    about_groups = [a for a in actions if a["subject"] in ("SML", SUPPRESSED)]
    # the controls and the peak action of SML are listed, their kind, text and clause withheld
    assert len(about_groups) == 2
    assert {a["subject"] for a in about_groups} == {SUPPRESSED}
    assert all("withheld" in a["kind"] and a["clause"] == "" for a in about_groups)
    records = list(csv.DictReader(io.StringIO(files["exposure_results.csv"].decode())))
    assert [r["laeq"] for r in records if r["group"] == SUPPRESSED] == [""]
    restricted = list(csv.DictReader(io.StringIO(_export(small, True)["group_exposure.csv"].decode())))
    # the restricted export keeps SML's task-based level (tasks of 93.8 to 99.6 dB(A))
    assert 93.8 < float(next(r for r in restricted if r["group"] == "SML")["lex_8h"]) < 99.7


# ---------------------------------------------------------------------------------------
# the suppressor itself


def _people() -> pd.DataFrame:
    return pd.DataFrame({
        "person_id": ["a", "b", "c", "d", "e", "f", "g", "h"],
        "group": ["G1", "G1", "G1", "G2", "G2", "G2", "G2", "G2"],
        "hire_date": pd.to_datetime(["2010-01-01"] * 7 + ["2026-03-01"]),
        "leave_date": pd.to_datetime([None, None, None, "2019-12-31", None, None, None, None]),
    })


def test_group_sizes_count_people_employed_in_the_period() -> None:
    sup = Suppressor(_people(), 3, "2025-01-01", "2025-12-31")
    # G2: d left before the period and h starts after it
    assert sup.group_people == {"G1": 3, "G2": 3}
    assert sup.groups == frozenset()
    sup4 = Suppressor(_people(), 4, "2025-01-01", "2025-12-31")
    assert sup4.groups == frozenset({"G1", "G2"})
    assert Suppressor(_people(), 4, "2025-01-01", "2025-12-31", restricted=True).groups == frozenset()
    # a group of the groups table with nobody in it has no figure to show either
    assert Suppressor(_people(), 3, "2025-01-01", "2025-12-31", groups=["G1", "G3"]).groups == frozenset({"G3"})


def test_suppress_and_suppress_frame() -> None:
    sup = Suppressor(_people(), 3, "2025-01-01", "2025-12-31")
    assert sup.suppress(81.2, 3) == 81.2
    assert sup.suppress(81.2, 2) == SUPPRESSED and sup.suppress(81.2, float("nan")) == SUPPRESSED
    assert sup.suppress(81.2, 0, shown=None) is None
    df = pd.DataFrame({"group": ["G1", "G2", "all"], "n": [3, 2, 5], "mean": [10.0, 20.0, 14.0],
                       "count": [3, 2, 5], "label": ["x", "y", "z"]})
    out = sup.suppress_frame(df, "n", ["mean", "count", "label"])
    assert out["mean"].tolist()[0] == 10.0 and pd.isna(out["mean"].iloc[1]) and out["mean"].iloc[2] == 14.0
    assert out["count"].iloc[1] is pd.NA and out["label"].tolist() == ["x", "", "z"]
    assert df["mean"].iloc[1] == 20.0  # the input is not changed
    restricted = Suppressor(_people(), 3, "2025-01-01", "2025-12-31", restricted=True)
    assert restricted.suppress(1.0, 1) == 1.0 and restricted.suppress_frame(df, "n", ["mean"]) is df


def test_withhold_groups_blanks_records_of_small_groups() -> None:
    sup = Suppressor(_people(), 4, "2025-01-01", "2024-12-31")
    df = pd.DataFrame({"person_id": ["a", "e"], "group": ["G1", "G2"], "laeq": [90.0, 80.0]})
    assert sup.groups == frozenset({"G1", "G2"})
    out = sup.withhold_groups(df, ["laeq"], person_col="person_id")
    assert out["group"].tolist() == [SUPPRESSED, SUPPRESSED] and out["person_id"].tolist() == ["", ""]
    assert out["laeq"].isna().all()
    assert sup.hides_text("group G1: 1 personal sample(s)") and not sup.hides_text("group G10: 3 samples")


def test_example_small_groups_are_withheld(built_example) -> None:
    # site_example: every group has at least min_group_size people in the period (none withheld);
    # any group that is small shows no figure on its exposure page
    ctx = built_example.context
    sup = ctx.suppress
    assert sup.min_size == ctx.programme.config.privacy.min_group_size
    for g in sorted(sup.groups):
        row = ctx.results.exposure.groups.set_index("group").loc[g]
        text = built_example.html("exposure")
        assert f"{row['lex_8h']:.1f}" not in text
    people = ctx.programme.table("people")
    for g, n in sup.group_people.items():
        assert (g in sup.groups) == (n < sup.min_size)
        assert n <= int((people["group"] == g).sum())


# ---------------------------------------------------------------------------------------
# exports people use


def test_actions_csv_lists_the_page_rows_in_the_page_order(built_example) -> None:
    from generator.export import export_files
    files = export_files(built_example.context)
    rows = list(csv.reader(io.StringIO(files["actions.csv"].decode())))
    assert rows[0] == ["subject", "kind", "detail", "due_date", "status", "clause", "section"]
    page = next(p for p in built_example.context.pages if p.slug == "actions")
    table = page.context["actions_table"]
    assert table.columns == ["Due", "Status", "Subject", "Kind", "Detail", "Clause", "Section"]
    assert len(rows) - 1 == page.context["n_actions"] >= len(table.rows) > 10
    for shown, written in zip(table.rows, rows[1:]):
        due, status, subject, kind, detail, clause, section = shown
        assert written == [subject, kind, detail, "" if due == "–" else due, status, clause, section]


def test_group_exposure_carries_each_rule_sets_category(built_example) -> None:
    from generator.export import export_files
    ctx = built_example.context
    rows = list(csv.DictReader(io.StringIO(export_files(ctx)["group_exposure.csv"].decode())))
    head = list(rows[0])
    assert head[:7] == ["group", "n_people", "n_samples", "lex_8h", "u_expanded", "lex_8h_upper", "band"]
    g = ctx.results.exposure.groups.set_index("group")
    for rid, rule in ctx.rules.items():
        assert {f"category_{rid}", f"category_level_{rid}", f"category_basis_{rid}"} <= set(head)
        for r in rows:
            src = g.loc[r["group"]]
            with_u = rule.judge_with_uncertainty and src[f"band_upper_{rid}"] != ""
            assert r[f"category_{rid}"] == src[f"band_upper_{rid}" if with_u else f"band_{rid}"]
            level = src[f"level_upper_{rid}" if with_u else f"level_{rid}"]
            assert r[f"category_level_{rid}"] == ("" if pd.isna(level) else f"{level:.2f}")
            assert r[f"category_basis_{rid}"] == ("value + U" if with_u else ("value" if not pd.isna(level) else ""))
    # the headline category is the contract's band column
    hid = next(iter(ctx.rules))
    assert all(r["band"] == r[f"category_{hid}"] for r in rows)


def test_workbook_holds_every_table_and_is_byte_identical(small: Path) -> None:
    from openpyxl import load_workbook
    a, b = _export(small, True), _export(small, True)
    assert a["results.xlsx"] == b["results.xlsx"]
    wb = load_workbook(io.BytesIO(a["results.xlsx"]))
    csvs = sorted(n for n in a if n.endswith(".csv"))
    assert wb.sheetnames == [n[:-4] for n in csvs]
    for name in csvs:
        ws = wb[name[:-4]]
        rows = list(csv.reader(io.StringIO(a[name].decode())))
        assert ws.freeze_panes == "A2"
        assert [c.value for c in ws[1]] == rows[0]
        assert ws.max_row == len(rows)
        assert all(8 <= ws.column_dimensions[c.column_letter].width <= 60 for c in ws[1])
    ge = wb["group_exposure"]
    header = [c.value for c in ge[1]]
    sml = next(r for r in ge.iter_rows(min_row=2, values_only=True) if r[0] == "SML")
    assert isinstance(sml[header.index("lex_8h")], float) and 93.8 < sml[header.index("lex_8h")] < 99.7
    with zipfile.ZipFile(io.BytesIO(a["results.xlsx"])) as z:
        core = z.read("docProps/core.xml").decode()
        # 1767225600 s after the epoch is 2026-01-01T00:00:00Z
        assert core.count("2026-01-01T00:00:00Z") == 2
        assert {i.date_time for i in z.infolist()} == {(2026, 1, 1, 0, 0, 0)}


def test_example_hearing_figures_rest_on_enough_people(built_example) -> None:
    # site_example has group-years with one to four people tested (early years, small groups):
    # no public hearing table may show a mean, a rate or an indicator of those
    pages = [p for p in built_example.context.pages if p.section == "hearing" and not p.restricted]
    min_size = built_example.context.suppress.min_size
    checked = 0
    for page in pages:
        for chart in page.charts:
            cols = chart.table.columns
            for head in ("People tested", "People", "Pairs"):
                if head not in cols:
                    continue
                i = cols.index(head)
                for row in chart.table.rows:
                    if row[i] != SUPPRESSED:
                        assert int(str(row[i]).replace(",", "")) >= min_size, (page.slug, chart.id, row)
                        checked += 1
            if "Ears" in cols:
                i = cols.index("Ears")
                assert all(int(r[i]) >= 2 * min_size - 1 for r in chart.table.rows), (page.slug, chart.id)
    assert checked > 20
