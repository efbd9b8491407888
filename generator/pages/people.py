"""Pages for the occupational-health office (restricted builds only): one page per person and
an index of people with a filter box.

Each person page gathers what the stages computed about one person: who they are, their own
and their group's exposure, their protector and its fit, training, notices, the reviewer's
decisions in words, and every audiogram with the baseline each was compared with. Public
builds never make these pages. Nothing here computes a result; it selects and formats.
"""
from __future__ import annotations

import dataclasses
import logging
import re
from typing import Any, Iterator

import pandas as pd

from .. import charts
from ..exposure import BASIS_LABELS
from ..hearing import EAR_NAMES
from ..inputs.spec import AUDIO_FREQS
from ..protection import METHOD_LABELS
from .base import Chart, Link, Page, SiteContext, Table

log = logging.getLogger(__name__)

BLANK = charts.BLANK
#: folder of the person pages in the site
FOLDER = "people"
#: audiogram symbols (common practice): right ear red circles, left ear blue crosses
EAR_STYLE = {"R": dict(color=charts.EAR_COLOURS["R"], symbol="circle-open"),
             "L": dict(color=charts.EAR_COLOURS["L"], symbol="x")}
#: line style per audiogram shown on a person's chart
ROLE_DASH = {"baseline in force": "dot", "baseline compared with": "dashdot", "previous": "dash", "latest": "solid"}
#: the reviewer's decisions in words
DECISION_WORDS = {
    "revise_baseline": "baseline revised: this audiogram becomes the baseline for later tests",
    "confirm_shift": "shift confirmed as a standard threshold shift",
    "cancel_shift": "shift not confirmed: it does not stand",
    "not_work_related": "shift judged not work-related (not recordable)",
}
KIND_WORDS = {"notice": "written notice", "retest": "retest", "refit": "protector refit", "referral": "referral"}
STATUS_WORDS = {"not_required": "not required", "done": "done", "on_time": "on time", "late": "late",
                "overdue": "overdue", "due_soon": "due soon", "scheduled": "scheduled"}
SOURCE_WORDS = {"personal": "own measurement", "group": "group level", "none": "no measurement",
                "": "no measurement"}


def person_slug(code: str) -> str:
    """Return the page slug of the person with *code*."""
    return f"{FOLDER}/{code}"


def _date(v: Any) -> str:
    if v is None or (not isinstance(v, str) and pd.isna(v)):
        return BLANK
    return pd.Timestamp(v).strftime("%Y-%m-%d")


def _num(v: Any, digits: int = 1, unit: str = "") -> str:
    if v is None or (not isinstance(v, str) and pd.isna(v)):
        return BLANK
    return f"{float(v):.{digits}f}{unit}"


def _yes(v: Any) -> str:
    if v is None or (not isinstance(v, (str, bool)) and pd.isna(v)):
        return BLANK
    return "yes" if bool(v) else "no"


def _text(v: Any) -> str:
    if v is None or (not isinstance(v, str) and pd.isna(v)):
        return BLANK
    s = str(v)
    return s if s else BLANK


def _age(birth: Any, birth_year: Any, as_of: pd.Timestamp) -> str:
    """Return the age in whole years at *as_of* (from the birth date, else the birth year)."""
    if birth is not None and not pd.isna(birth):
        b = pd.Timestamp(birth)
        years = as_of.year - b.year - ((as_of.month, as_of.day) < (b.month, b.day))
        return f"{years}"
    if birth_year is not None and not pd.isna(birth_year):
        return f"about {as_of.year - int(birth_year)}"
    return BLANK


def _by_person(df: pd.DataFrame, column: str = "person_id") -> dict[str, pd.DataFrame]:
    """Return the rows of *df* per person id (one groupby for the whole build)."""
    if df is None or df.empty or column not in df.columns:
        return {}
    return {str(k): g for k, g in df.groupby(df[column].astype(str), sort=True)}


def _first(df: pd.DataFrame | None) -> dict[str, Any]:
    return {} if df is None or df.empty else df.iloc[0].to_dict()


def _facts(rows: list[tuple[str, str]]) -> Table:
    return Table(columns=["", ""], rows=[[k, v] for k, v in rows], classes=["", ""])


def audiogram_chart(rows: pd.DataFrame, baselines: pd.DataFrame | None, cid: str, code: str) -> Chart:
    """Return one person's audiogram chart per ear: the baseline in force, the baseline the latest
    test was compared with (when a revision came later), the previous and the latest test."""
    fig = charts.Figure()
    table_rows = []
    in_force = {} if baselines is None or baselines.empty else dict(
        zip(baselines["ear"].astype(str), pd.to_datetime(baselines["baseline_date"])))
    for ear in ("R", "L"):
        e = rows[rows["ear"] == ear].sort_values("date")
        if e.empty:
            continue
        latest = e.iloc[-1]
        picks: list[tuple[str, pd.Series]] = []
        now = in_force.get(ear)
        compared = latest["baseline_date"]
        if now is not None and not pd.isna(now):
            base = e[e["date"] == now]
            if not base.empty and now != latest["date"]:
                picks.append(("baseline in force", base.iloc[0]))
        if not pd.isna(compared) and compared != now and compared != latest["date"]:
            base = e[e["date"] == compared]
            if not base.empty:
                picks.append(("baseline compared with", base.iloc[0]))
        shown = {p[1]["date"] for p in picks}
        prev = e[(e["date"] < latest["date"]) & ~e["date"].isin(shown)]
        if not prev.empty:
            picks.append(("previous", prev.iloc[-1]))
        picks.append(("latest", latest))
        style = EAR_STYLE[ear]
        for role, r in picks:
            ys = [None if pd.isna(r[f"hl_{f}"]) else float(r[f"hl_{f}"]) for f in AUDIO_FREQS]
            label = role
            if role == "latest" and now is not None and not pd.isna(now) and now == r["date"]:
                label = "latest, now the baseline in force"
            name = f"{EAR_NAMES[ear]}, {label} {_date(r['date'])}"
            fig.add_trace(charts.trace("scatter", x=list(AUDIO_FREQS), y=ys, name=name, mode="lines+markers",
                                       line=dict(color=style["color"], dash=ROLE_DASH[role], width=1.5),
                                       marker=dict(symbol=style["symbol"], size=10, color=style["color"])))
            table_rows.append([EAR_NAMES[ear], label, _date(r["date"])]
                              + ["NR" if bool(r[f"nr_{f}"]) else _num(r[f"hl_{f}"], 0) for f in AUDIO_FREQS])
    fig.update_xaxes(type="log", tickvals=list(AUDIO_FREQS), ticktext=[f"{f:g}" for f in AUDIO_FREQS],
                     title=dict(text="frequency, Hz"))
    fig.update_yaxes(autorange="reversed", title=dict(text="hearing level, dB HL"), dtick=10)
    charts.base_layout(fig, None, 460)
    table = Table(["Ear", "Audiogram", "Date"] + [f"{f} Hz" for f in AUDIO_FREQS], table_rows,
                  caption="Hearing levels shown in the chart, dB HL (NR = no response at the audiometer's limit)",
                  classes=["", "", ""] + ["num"] * len(AUDIO_FREQS))
    summary = (f"Audiograms of {code}: per ear the baseline in force, the previous and the latest test "
               "(right ear red circles, left ear blue crosses; hearing level increases downwards).")
    return Chart(cid, fig, summary, table, height=460, title="Audiograms, dB HL")


@dataclasses.dataclass
class _Sources:
    """Every per-person table of the build, grouped by person once."""

    people: pd.DataFrame
    exposure: dict[str, pd.DataFrame]
    measurements: dict[str, pd.DataFrame]
    groups: pd.DataFrame
    protection: dict[str, pd.DataFrame]
    status: dict[str, pd.DataFrame]
    actions: dict[str, pd.DataFrame]
    audiograms: dict[str, pd.DataFrame]
    baselines: dict[str, pd.DataFrame]
    followups: dict[str, pd.DataFrame]
    reviews: dict[str, pd.DataFrame]
    notices: dict[str, pd.DataFrame]
    training: dict[str, pd.DataFrame]


def _sources(ctx: SiteContext) -> _Sources:
    r, prog = ctx.results, ctx.programme
    acts = r.compliance.actions
    acts = acts[acts["subject_type"].astype(str).eq("person")] if len(acts) else acts
    meas = r.exposure.measurements
    meas = meas[meas["person_id"].astype(str).ne("")] if len(meas) else meas
    return _Sources(
        people=prog.table("people"), exposure=_by_person(r.exposure.people), measurements=_by_person(meas),
        groups=r.exposure.groups, protection=_by_person(r.protection.people),
        status=_by_person(r.compliance.people), actions=_by_person(acts, "subject"),
        audiograms=_by_person(r.hearing.audiograms), baselines=_by_person(r.hearing.baselines),
        followups=_by_person(r.hearing.followups), reviews=_by_person(prog.table("reviews")),
        notices=_by_person(prog.table("notices")), training=_by_person(prog.table("training")))


def _exposure_tables(ctx: SiteContext, src: _Sources, pid: str, group: str) -> tuple[Table, Table]:
    head = ctx.headline
    own = _first(src.exposure.get(pid))
    g = src.groups[src.groups["group"].astype(str).eq(group)] if len(src.groups) else src.groups
    grp = _first(g)
    facts = [
        ("LEX,8h used for this person, dB(A)", _num(own.get("lex_8h"))),
        (f"8-h TWA ({head.short}), dB(A)", _num(own.get("twa"))),
        ("from", SOURCE_WORDS.get(str(own.get("source", "")), _text(own.get("source")))),
        (f"judged exposed ({head.short})", _yes(own.get("exposed"))),
        ("first exposed on", _date(own.get("first_exposed_date"))),
        (f"group {group}: LEX,8h, dB(A)", _num(grp.get("lex_8h"))),
        ("group: expanded uncertainty U, dB", _num(grp.get("u_expanded"))),
        ("group: exposure category", _text(grp.get("band"))),
        ("group: last measured", _date(grp.get("last_measured"))),
    ]
    m = src.measurements.get(pid)
    rows = []
    if m is not None:
        for x in m.sort_values("date", ascending=False).itertuples():
            rows.append([_date(x.date), _text(x.measurement_id), _num(x.duration_h, 2), _num(x.laeq),
                         _num(x.lex_8h), _num(x.osha_twa), _num(x.lcpeak), BASIS_LABELS.get(str(x.basis), _text(x.basis))])
    meas = Table(["Date", "Measurement", "Duration, h", "LAeq, dB(A)", "LEX,8h, dB(A)", "OSHA TWA, dB(A)",
                  "LCpeak, dB(C)", "Basis"], rows, caption="This person's own noise measurements",
                 classes=["", "", "num", "num", "num", "num", "num", ""])
    return _facts(facts), meas


def _protection_table(src: _Sources, pid: str) -> Table:
    p = _first(src.protection.get(pid))
    return _facts([
        ("protector on record", _text(p.get("protector_id"))),
        ("type", _text(p.get("protector_type"))),
        ("exposure judged, dB(A)", _num(p.get("exposure_level"))),
        ("estimated level under the protector, dB(A)", _num(p.get("protected_level"))),
        ("estimated by", METHOD_LABELS.get(str(p.get("method", "")), _text(p.get("method")))),
        ("target under the protector, dB(A)", _num(p.get("target"), 0)),
        ("target lowered after a threshold shift", _yes(p.get("after_sts"))),
        ("verdict", _text(p.get("adequacy"))),
        ("last fit test", _date(p.get("fit_date"))),
        ("personal attenuation rating (PAR), dB", _num(p.get("par"))),
    ])


def _status_table(src: _Sources, pid: str) -> Table:
    s = _first(src.status.get(pid))

    def word(v: Any) -> str:
        return STATUS_WORDS.get(str(v), _text(v))
    return _facts([
        ("in the programme", _yes(s.get("in_programme"))),
        ("required to be enrolled", _yes(s.get("must_enrol"))),
        ("baseline audiogram", f"{word(s.get('baseline_status'))} (due {_date(s.get('baseline_due'))})"),
        ("periodic audiogram", f"{word(s.get('audiogram_status'))} (next due {_date(s.get('next_audiogram_due'))})"),
        ("training", f"{word(s.get('training_status'))} (next due {_date(s.get('next_training_due'))})"),
        ("exit audiogram", word(s.get("exit_status"))),
        ("protector required", _yes(s.get("protector_required"))),
    ])


def _list_table(df: pd.DataFrame | None, columns: dict[str, str], caption: str, dates: tuple[str, ...] = ("date",),
                words: dict[str, dict[str, str]] | None = None) -> Table:
    rows = []
    if df is not None:
        for _, r in df.sort_values(list(dates)[:1] or list(columns)[:1]).iterrows():
            cells = []
            for c in columns:
                v = r.get(c)
                if c in dates or c.endswith("_date"):
                    cells.append(_date(v))
                elif words and c in words:
                    cells.append(words[c].get(str(v), _text(v)))
                else:
                    cells.append(_text(v))
            rows.append(cells)
    return Table(list(columns.values()), rows, caption=caption)


def _person_page(ctx: SiteContext, src: _Sources, person: dict[str, Any], as_of: pd.Timestamp,
                 group_names: dict[str, str]) -> Page:
    pid = str(person["person_id"])
    code = ctx.code(pid)
    group = str(person.get("group", ""))
    identity = _facts([
        ("name", _text(person.get("name"))),
        ("person id", pid),
        ("code on public pages", code),
        (f"age on {as_of:%Y-%m-%d}", _age(person.get("birth_date"), person.get("birth_year"), as_of)),
        ("sex", _text(person.get("sex"))),
        ("department", _text(person.get("department"))),
        ("job title", _text(person.get("job_title"))),
        ("similar exposure group", f"{group} ({group_names[group]})" if group_names.get(group) else _text(group)),
        ("hired", _date(person.get("hire_date"))),
        ("left", _date(person.get("leave_date"))),
    ])
    exposure_facts, measurements = _exposure_tables(ctx, src, pid, group)
    ag = src.audiograms.get(pid)
    base = src.baselines.get(pid)
    hist_rows = []
    chart_list = []
    if ag is not None and len(ag):
        ag = ag.sort_values(["date", "ear"])
        for r in ag.itertuples():
            hist_rows.append([_date(r.date), EAR_NAMES.get(r.ear, r.ear), _text(r.kind), _date(r.baseline_date),
                              _num(r.avg_234), _num(r.shift_234), _num(r.shift_234_age_corrected), _yes(r.osha_sts),
                              _yes(r.osha_sts_age_corrected), _text(r.shift_status), _text(r.retest_status),
                              _yes(r.recordable), _yes(r.niosh_shift),
                              DECISION_WORDS.get(str(r.review_decision), _text(r.review_decision)),
                              _yes(r.valid_check), "yes" if r.nr_any else "no"])
        cid = "person-" + re.sub(r"[^a-z0-9]+", "-", code.lower()).strip("-")
        chart_list.append(audiogram_chart(ag, base, f"{cid}-1", code))
    history = Table(["Date", "Ear", "Kind", "Compared with baseline of", "2/3/4 kHz average, dB HL", "Shift, dB",
                     "Shift age-corrected, dB", "STS", "STS age-corrected", "Status", "Retest", "Recordable",
                     "NIOSH shift", "Reviewer's decision", "Audiometer checked", "No response (NR)"], hist_rows,
                    caption="Every audiogram of this person, with the baseline it was compared with")
    baselines = _list_table(base, {"ear": "Ear", "baseline_date": "Baseline in force", "source": "Chosen as",
                                   "candidate": "Revision candidate", "candidate_date": "Candidate test"},
                            "Baselines in force now (revised only by the reviewer)", dates=("baseline_date",))
    if len(baselines.rows):
        for row in baselines.rows:
            row[0] = EAR_NAMES.get(row[0], row[0])
    reviews = _list_table(src.reviews.get(pid), {"date": "Date", "ear": "Ear", "decision": "Decision",
                                                 "audiogram_date": "About the audiogram of",
                                                 "reviewer_role": "Reviewer", "note": "Note"},
                          "Decisions of the reviewing audiologist or physician", words={"decision": DECISION_WORDS})
    followups = _list_table(src.followups.get(pid), {"ear": "Ear", "kind": "Follow-up", "trigger_date": "After",
                                                     "due_date": "Due", "done_date": "Done", "status": "Status",
                                                     "clause": "Clause"}, "Follow-ups of shifts and decisions",
                            dates=("trigger_date",), words={"kind": KIND_WORDS, "ear": EAR_NAMES})
    actions = _list_table(src.actions.get(pid), {"due_date": "Due", "status": "Status", "kind": "Action",
                                                 "detail": "Detail", "clause": "Clause"},
                          "Open actions for this person", dates=("due_date",))
    training = _list_table(src.training.get(pid), {"date": "Date", "topic": "Topic"}, "Training on record")
    notices = _list_table(src.notices.get(pid), {"date": "Date", "about": "About"}, "Written notices given")
    return Page(slug=person_slug(code), title=f"{_text(person.get('name'))} ({code})", template="person.html",
                section="hearing", restricted=True, charts=chart_list,
                context={"code": code, "pid": pid, "name": _text(person.get("name")), "group": group,
                         "identity": identity, "exposure": exposure_facts, "measurements": measurements,
                         "protection": _protection_table(src, pid), "status": _status_table(src, pid),
                         "history_table": history, "baselines_table": baselines, "reviews_table": reviews,
                         "followups_table": followups, "actions_table": actions, "training_table": training,
                         "notices_table": notices})


def build(ctx: SiteContext) -> list[Page]:
    """Return the person pages and their index (restricted builds only; none in a public build)."""
    if not ctx.restricted:
        return []
    src = _sources(ctx)
    people = src.people
    if people.empty:
        return []
    as_of = pd.Timestamp(ctx.programme.config.period.end)
    groups = ctx.programme.table("groups")
    group_names = ({str(g): str(n) for g, n in zip(groups["group"], groups["name"]) if str(n)}
                   if "name" in groups.columns else {})
    pages = [_person_page(ctx, src, rec, as_of, group_names)
             for rec in people.sort_values("person_id", kind="mergesort").to_dict("records")]
    rows = []
    for rec, page in zip(people.sort_values("person_id", kind="mergesort").to_dict("records"), pages):
        code = page.context["code"]
        rows.append([Link(code, page.slug + ".html"), _text(rec.get("name")), str(rec["person_id"]),
                     _text(rec.get("group")), _text(rec.get("department")), _date(rec.get("leave_date"))])
    index = Table(["Code", "Name", "Person id", "Group", "Department", "Left"], rows,
                  caption=f"{len(rows):,} people on record")
    pages.insert(0, Page(slug="people", title="People (restricted)", template="people.html", section="hearing",
                         restricted=True, context={"index": index}))
    log.info("person pages: %d", len(pages) - 1)
    return pages


# ---------------------------------------------------------------------------------------
# every person code in a restricted build links to the person's page


def _tables(value: Any) -> Iterator[Table]:
    if isinstance(value, Table):
        yield value
    elif isinstance(value, dict):
        for v in value.values():
            yield from _tables(v)
    elif isinstance(value, (list, tuple)):
        for v in value:
            yield from _tables(v)


def link_person_codes(ctx: SiteContext, pages: list[Page]) -> int:
    """In a restricted build, turn every table cell that is a person code into a link to that
    person's page; return the number of cells linked. Public builds are left as they are."""
    if not ctx.restricted:
        return 0
    slugs = {p.context["code"]: p.slug for p in pages if p.slug.startswith(FOLDER + "/") and "code" in p.context}
    n = 0
    for page in pages:
        tables = list(_tables(page.context)) + [c.table for c in page.charts]
        for table in tables:
            for row in table.rows:
                for i, cell in enumerate(row):
                    if isinstance(cell, str) and cell in slugs and slugs[cell] != page.slug:
                        row[i] = Link(cell, slugs[cell] + ".html")
                        n += 1
    return n
