"""The protection page: protector catalogue, adequacy by group, levels under the protector."""
from __future__ import annotations

import logging
from typing import Any

import numpy as np
import pandas as pd

from .. import charts
from ..protection import (ADEQUACY, EN458_ACTION_LEVEL, METHOD_LABELS, OVERPROTECTION_BELOW,
                          ProtectionResult)
from .base import Chart, Page, SiteContext, Table
from .programme import cap_caption, cap_rows

log = logging.getLogger(__name__)

SUPPRESSED = "suppressed"
#: colours of the adequacy classes in the stacked bar (status colours of the site)
ADEQUACY_COLOURS = {k: charts.STATUS_COLOURS[k] for k in
                    ("adequate", "insufficient", "over-protected", "no protector", "not exposed", "unknown")}
TYPE_LABELS = {"earmuff": "earmuff", "foam_plug": "foam plug", "premolded_plug": "premolded plug",
               "canal_cap": "canal cap", "custom_plug": "custom plug", "other": "other", "dual": "plug + muff"}


def _num(v: Any, digits: int = 1) -> str:
    if v is None or (isinstance(v, float) and np.isnan(v)) or v is pd.NaT:
        return charts.BLANK
    return f"{float(v):.{digits}f}"


def catalogue_table(cat: pd.DataFrame) -> Table:
    """Return the protector catalogue with the derated values by method."""
    df = cat.copy()
    types = df["type"].astype(object)  # a categorical column: its map would keep the categories
    df["type_label"] = types.map(TYPE_LABELS).fillna(types)
    df["hml"] = [charts.BLANK if np.isnan(h) else f"{h:g}/{m:g}/{lo:g}"
                 for h, m, lo in zip(df["h"].astype(float), df["m"].astype(float), df["l"].astype(float))]
    df["octave"] = np.where(df["has_octave"], "yes", "no")
    cols = {"protector_id": "Protector", "type_label": "Type", "name": "Name", "nrr": "NRR",
            "nrr_a": "NRR − 7 (App. B, A-weighted)", "nrr_osha_50": "(NRR − 7)/2 (OSHA 50 %, for weighing controls only)",
            "nrr_niosh": "NIOSH 1998-derated NRR (superseded 2025 by fit testing)", "snr": "SNR", "hml": "H/M/L", "octave": "Octave data",
            "n_wearers": "Wearing"}
    return charts.table_from_frame(df, cols, {"n_wearers": "d", "nrr": "g", "snr": "g"},
                                   caption="Protector catalogue with the attenuation each method credits, dB")


def _visible(people: pd.DataFrame, suppressed: frozenset[str]) -> pd.DataFrame:
    return people[~people["group"].isin(sorted(suppressed))]


def adequacy_chart(groups: pd.DataFrame, suppressed: frozenset[str], rules_name: str = "") -> Chart:
    """Return the stacked bar of adequacy counts per group (suppressed groups left out)."""
    shown = groups[~groups["group"].isin(sorted(suppressed))]
    series = {a: shown[a].tolist() for a in ADEQUACY}
    fig = charts.stacked_bar(shown["group"], series, xaxis_title="similar exposure group",
                             yaxis_title="people", colours=ADEQUACY_COLOURS)
    rows = []
    for _, g in groups.iterrows():
        if g["group"] in suppressed:
            rows.append([g["group"]] + [SUPPRESSED] * len(ADEQUACY))
        else:
            rows.append([g["group"]] + [str(int(g[a])) for a in ADEQUACY])
    table = Table(columns=["Group", *ADEQUACY], rows=rows, caption="People per group and adequacy class",
                  classes=[""] + ["num"] * len(ADEQUACY))
    n_ins = int(shown["insufficient"].sum())
    n_over = int(shown["over-protected"].sum())
    summary = (f"Across {len(shown)} group{'s' if len(shown) != 1 else ''} shown, {n_ins} "
               f"{'person has' if n_ins == 1 else 'people have'} an estimated level under the protector above "
               f"the target and {n_over} {'is' if n_over == 1 else 'are'} below "
               f"{OVERPROTECTION_BELOW:g} dB(A) (possible over-protection).")
    return Chart(id="protection-1", figure=fig, summary=summary, table=table,
                 title="Adequacy of hearing protection per similar exposure group (estimated level under the "
                 f"protector against the target{' of ' + rules_name if rules_name else ''}), people")


def distribution_chart(people: pd.DataFrame, targets: dict[str, float | None], rules_name: str = "") -> Chart:
    """Return the distribution of levels under the protector (whole decibels) with the target lines."""
    lv = people["protected_level"].dropna()
    bins = np.floor(lv.to_numpy(dtype=float)).astype(int)
    counts = pd.Series(bins).value_counts().sort_index() if len(bins) else pd.Series(dtype=int)
    fig = charts.bar([b + 0.5 for b in counts.index], counts.tolist(),
                     xaxis_title="estimated level under the protector, dB(A)", yaxis_title="people")
    fig.update_traces(width=0.9, hovertemplate="%{x} dB(A): %{y} people<extra></extra>")
    fig.update_yaxes(rangemode="tozero")
    charts.reference_lines(fig, {k: v for k, v in targets.items() if v is not None}, axis="x")
    table = Table(columns=["Level bin, dB(A)", "People"],
                  rows=[[f"{b} to < {b + 1}", str(int(n))] for b, n in counts.items()],
                  caption="People per 1-dB bin of the estimated level under the protector",
                  classes=["", "num"])
    if len(lv):
        summary = (f"Estimated levels under the protector of {len(lv)} people range from {lv.min():.0f} to "
                   f"{lv.max():.0f} dB(A), median {lv.median():.0f} dB(A); dashed lines mark the targets.")
    else:
        summary = "No level under a protector could be estimated from the records."
    return Chart(id="protection-2", figure=fig, summary=summary, table=table,
                 title="Estimated A-weighted level under the protector, dB(A), people per 1-dB bin"
                 + (f"; lines: targets of {rules_name}" if rules_name else ""))


def coverage_chart(groups: pd.DataFrame, suppressed: frozenset[str]) -> Chart:
    """Return the share of protector wearers per group with a fit-tested PAR."""
    shown = groups[~groups["group"].isin(sorted(suppressed)) & (groups["n_wearing"] > 0)]
    share = (shown["share_par"] * 100).round(1)
    fig = charts.bar(shown["group"], share, xaxis_title="similar exposure group",
                     yaxis_title="wearers with a fit test (PAR), %")
    fig.update_yaxes(range=[0, 100])
    rows = []
    for _, g in groups.iterrows():
        if g["group"] in suppressed:
            rows.append([g["group"], SUPPRESSED, SUPPRESSED, SUPPRESSED])
        else:
            share_txt = charts.BLANK if pd.isna(g["share_par"]) else f"{g['share_par'] * 100:.0f} %"
            rows.append([g["group"], str(int(g["n_wearing"])), str(int(g["n_par"])), share_txt])
    table = Table(columns=["Group", "Wearing a protector", "With a PAR", "Share"], rows=rows,
                  caption="Fit-test coverage per group", classes=["", "num", "num", "num"])
    n_w = int(shown["n_wearing"].sum())
    n_p = int(shown["n_par"].sum())
    summary = (f"{n_p} of {n_w} protector wearers in the groups shown have a fit-tested personal "
               f"attenuation rating.")
    return Chart(id="protection-3", figure=fig, summary=summary, table=table, title="Protector wearers with a fit-tested personal attenuation rating (PAR), %, "
                 "per similar exposure group")


def people_table(people: pd.DataFrame, ctx: SiteContext) -> Table:
    """Return the people with too little or too much protection, by pseudonymous code.

    Those above the target come first, the furthest above first; then the over-protected,
    lowest level first. A public page lists the first LIST_CAP rows and says how many there are.
    """
    sel = people[people["adequacy"].isin(["insufficient", "over-protected"])]
    sel = _visible(sel, ctx.suppressed_groups)
    level = pd.to_numeric(sel["protected_level"], errors="coerce")
    over_target = level - pd.to_numeric(sel["target"], errors="coerce")
    # one key for both classes: larger means more urgent (furthest above the target, or lowest level)
    urgency = np.where(sel["adequacy"].eq("insufficient"), over_target, -level)
    order = pd.DataFrame({"cls": sel["adequacy"].ne("insufficient").to_numpy(), "u": -urgency,
                          "pos": np.arange(len(sel))})
    order = order.sort_values(["cls", "u", "pos"], kind="mergesort", na_position="last")
    shown = cap_rows(sel.iloc[order["pos"].to_numpy()], ctx).copy()
    shown["code"] = [ctx.code(p) for p in shown["person_id"]]
    shown["method_label"] = shown["method"].map(METHOD_LABELS).fillna("")
    cols = {"code": "Person", "group": "Group", "protector_id": "Protector", "method_label": "Method",
            "exposure_level": "Exposure, dB(A)", "protected_level": "Under the protector, dB(A)",
            "target": "Target, dB(A)", "adequacy": "Assessment"}
    caption = cap_caption("People whose estimated level under the protector is above the target (furthest above "
                          "first) or below the over-protection band", len(shown), len(sel),
                          "the counts per group in the adequacy chart are complete and the full list is in the "
                          "restricted build (hcpsite build --restricted)")
    return charts.table_from_frame(shown, cols, {"target": "g"}, caption=caption)


def methods_table(res: ProtectionResult, visible_ids: set[str]) -> Table:
    """Return per method how many people it could be applied to and how often it governs."""
    methods = res.methods
    keep = methods["person_id"].isin(visible_ids).to_numpy(bool)
    m = methods[["governs", "protected_level"]][keep]
    method = methods["method"].to_numpy(object)[keep]
    rows = []
    for key, label in METHOD_LABELS.items():
        sub = m[method == key]
        if sub.empty:
            continue
        rows.append([label, str(len(sub)), str(int(sub["governs"].sum())),
                     _num(sub["protected_level"].median(), 0)])
    return Table(columns=["Method", "People it applies to", "Governing", "Median level, dB(A)"], rows=rows,
                 caption="Methods the records allow (the governing one is the first of PAR, octave band, "
                         "HML, SNR, NRR)", classes=["", "num", "num", "num"])


def build(ctx: SiteContext) -> list[Page]:
    """Return the protection page."""
    res: ProtectionResult | None = ctx.results.protection
    rules = ctx.headline
    if res is None:
        return []
    people = res.people
    visible = _visible(people, ctx.suppressed_groups)
    targets = {f"{rules.short} target {rules.protected_target:g} dB(A)": rules.protected_target,
               f"{rules.short} target after STS {rules.protected_target_after_sts:g} dB(A)"
               if rules.protected_target_after_sts is not None else "after STS": rules.protected_target_after_sts,
               f"over-protection below {OVERPROTECTION_BELOW:g} dB(A) (own setting)": OVERPROTECTION_BELOW}
    if rules.protected_target_after_sts == rules.protected_target:
        targets = {k: v for k, v in targets.items() if "after STS" not in k}
    counts = {a: int((visible["adequacy"] == a).sum()) for a in ADEQUACY}
    has_data = ctx.programme.has("protectors") or ctx.programme.has("protector_fits")
    page_charts = [adequacy_chart(res.groups, ctx.suppressed_groups, rules.name),
                   distribution_chart(visible, targets, rules.name),
                   coverage_chart(res.groups, ctx.suppressed_groups)] if has_data else []
    context = {
        "has_data": has_data,
        "rules_name": rules.name,
        "target": rules.protected_target,
        "target_after_sts": rules.protected_target_after_sts,
        "over_below": OVERPROTECTION_BELOW,
        "en458_action": EN458_ACTION_LEVEL,
        "counts": [{"label": a, "value": counts[a]} for a in ADEQUACY],
        "n_people": int(len(visible)),
        "catalogue_table": catalogue_table(res.protectors),
        "people_table": people_table(people, ctx),
        "methods_table": methods_table(res, set(visible["person_id"].tolist())),
        "any_suppressed": bool(set(people["group"].tolist()) & set(ctx.suppressed_groups)),
    }
    return [Page(slug="protection", title="Hearing protection", template="protection.html",
                 section="protection", in_nav=True, context=context, charts=page_charts)]
