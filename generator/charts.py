"""Plotly figure helpers shared by every section, and one small site template.

Helpers take plain sequences or DataFrames of already computed values (never one point
per raw record) and return :class:`Figure` objects: a chart's data as plain dicts and lists,
written as JSON without going through plotly's per-property validators. A figure holds
its properties in the order plotly itself would write them (a trace's or a whole compound
property's keys in alphabetical order, a trace's type last, later updates appended), so
the page is the same byte for byte; tests check each helper against plotly's own figure
objects. Page builders wrap figures in :class:`~generator.pages.base.Chart` with a summary
sentence and a data table (:func:`table_from_frame`). Importing this module registers the
site template and makes it the default, so figures stay small and look alike.
"""
from __future__ import annotations

import copy
import html
import math
from functools import lru_cache
from typing import Any, Callable, Mapping, Sequence

import numpy as np
import pandas as pd
import plotly.graph_objects as go
import plotly.io as pio
from _plotly_utils.utils import convert_to_base64

from .pages.base import Table
from .portable import round_floats

TEMPLATE_NAME = "hcpsite"
#: One meaning per colour across the site. A status colour says how something stands (green
#: only for what is in order), a rule-set colour says which rule set a series is judged
#: under, a category colour tells apart series of equal standing (groups, years, sources).
#: The three sets share no colour; every chart takes its colours from here.
GREEN, AMBER, BRICK, WINE, SLATE, MIST = "#3d8c57", "#e08a2e", "#b8423c", "#6d2135", "#8a96a3", "#c8ced4"
#: status -> colour (the words the charts and tables use for a status)
STATUS_COLOURS: dict[str, str] = {
    "on time": GREEN, "adequate": GREEN, "all checks valid": GREEN,
    "late": AMBER, "due soon or open": AMBER, "over-protected": AMBER,
    "missing": BRICK, "overdue": BRICK, "insufficient": BRICK, "a check missing or failed": BRICK,
    "no protector": WINE,
    "not yet due": SLATE, "not exposed": SLATE,
    "unknown": MIST,
}
#: statuses that say something is wrong or exposed: never green
ALARM_STATUSES = frozenset({"late", "missing", "overdue", "insufficient", "a check missing or failed",
                            "no protector", "due soon or open"})
#: rule set (by its short name, as the charts' legends show it) -> colour
RULE_COLOURS: dict[str, str] = {"OSHA": "#2b5d8a", "NIOSH": "#3aa7b8", "EU": "#6a51a3", "Custom": "#8c6d46"}
#: colours of series of equal standing, in order (the charts' default colour cycle)
CATEGORY_COLOURS: tuple[str, ...] = ("#34495e", "#c9a227", "#c0679b", "#74a9cf", "#a1887f", "#1d2730",
                                     "#9fb6c8", "#d9a5c0")
#: audiogram symbols' colours (common practice: right ear red, left ear blue); shown on audiograms only
EAR_COLOURS: dict[str, str] = {"R": "#c0392b", "L": "#1f5fa8"}
#: the default colour cycle of the site template
PALETTE = CATEGORY_COLOURS
#: Colour of reference lines (action and limit values of a rule set).
REFERENCE_COLOUR = "#8a1c1c"


def status_colour(status: str) -> str:
    """Return the colour of *status* (a word of STATUS_COLOURS)."""
    return STATUS_COLOURS[status]


def rule_colour(short: str, position: int = 0) -> str:
    """Return the colour of the rule set named *short* (a category colour for a rule set not listed)."""
    return RULE_COLOURS.get(short, CATEGORY_COLOURS[position % len(CATEGORY_COLOURS)])


def category_colour(position: int) -> str:
    """Return the category colour of the *position*-th series."""
    return CATEGORY_COLOURS[position % len(CATEGORY_COLOURS)]
FONT = "system-ui, -apple-system, 'Segoe UI', Roboto, 'Helvetica Neue', Arial, sans-serif"
#: Cell shown for a missing number in tables.
BLANK = "–"


def _site_template() -> go.layout.Template:
    """Return the small site template (fonts, colours, grid)."""
    axis = dict(gridcolor="#e4e7eb", linecolor="#9aa4ae", zeroline=False, ticks="outside",
                tickcolor="#9aa4ae", automargin=True)
    return go.layout.Template(layout=dict(
        font=dict(family=FONT, size=13, color="#1d2730"),
        colorway=list(PALETTE),
        paper_bgcolor="#ffffff", plot_bgcolor="#ffffff",
        xaxis=axis, yaxis=axis,
        margin=dict(l=60, r=24, t=48, b=48),
        legend=dict(orientation="h", yanchor="bottom", y=1.02, xanchor="left", x=0),
        hoverlabel=dict(font=dict(family=FONT)),
        title=dict(x=0, xanchor="left", font=dict(size=15)),
    ))


def register_template() -> None:
    """Register the site template and make it plotly's default (idempotent)."""
    if TEMPLATE_NAME not in pio.templates:
        pio.templates[TEMPLATE_NAME] = _site_template()
    pio.templates.default = TEMPLATE_NAME


register_template()


@lru_cache(maxsize=1)
def _template_json() -> dict[str, Any]:
    """Return the site template as a new figure carries it (``layout.template``)."""
    return go.Figure().to_dict()["layout"]["template"]


def _whole(value: Any) -> Any:
    """Return *value* as plotly stores a compound property set whole: dict keys in alphabetical order, no None."""
    if isinstance(value, dict) and "bdata" not in value:  # a typed array (dtype, bdata) is a value
        return {k: _whole(value[k]) for k in sorted(value) if value[k] is not None}
    return value


def trace(kind: str, **props: Any) -> dict[str, Any]:
    """Return a trace of type *kind* ("bar", "scatter", "box", "contour") as plotly's constructor stores it."""
    out = {k: _whole(v) for k, v in sorted(props.items()) if v is not None}
    out["type"] = kind
    return out


def contour(**props: Any) -> dict[str, Any]:
    """Return a contour trace (the noise map's one): plotly's own, which expands a named colour scale."""
    return go.Contour(**props).to_plotly_json()


#: layout properties that are lists of objects (an empty one is not written)
_OBJECT_LISTS = frozenset({"shapes", "annotations"})


def _update(target: dict[str, Any], props: Mapping[str, Any], by_name: bool = False) -> None:
    """Update *target* as one plotly update call does.

    Nested objects that are missing are made at once, in the order met; the values are then
    set after them in the order met (in the alphabetical order of their paths with *by_name*,
    as plotly applies a figure's trace edits). A list of objects (shapes, annotations) is set
    whole, each with its keys in alphabetical order.
    """
    leaves: list[tuple[str, dict[str, Any], str, Any]] = []

    def walk(node: dict[str, Any], update: Mapping[str, Any], path: str) -> None:
        for key, value in update.items():
            if value is None:
                continue
            if isinstance(value, dict):
                walk(node.setdefault(key, {}), value, path + key + ".")
            elif key in _OBJECT_LISTS and isinstance(value, (list, tuple)):
                if value:
                    leaves.append((path + key, node, key, [_whole(v) for v in value]))
            else:
                leaves.append((path + key, node, key, value))

    walk(target, props, "")
    for _, node, key, value in (sorted(leaves, key=lambda leaf: leaf[0]) if by_name else leaves):
        node[key] = value


class Figure:
    """A chart as plain data: ``data`` (list of trace dicts) and ``layout`` (dict, the site template first).

    The methods are the few of ``plotly.graph_objects.Figure`` the pages use, with the same
    effect on the figure's JSON.
    """

    def __init__(self, data: dict[str, Any] | Sequence[dict[str, Any]] | None = None) -> None:
        self.data: list[dict[str, Any]] = [] if data is None else [data] if isinstance(data, dict) else list(data)
        self.layout: dict[str, Any] = {"template": copy.deepcopy(_template_json())}

    @classmethod
    def from_dict(cls, fig: Mapping[str, Any]) -> Figure:
        """Return the figure plotly makes of a whole figure dict: every key in alphabetical order, a trace's type last."""
        out = cls.__new__(cls)
        out.data = [trace(str(t.get("type", "scatter")), **{k: v for k, v in t.items() if k != "type"})
                    for t in fig.get("data", [])]
        out.layout = _whole(_sorted_lists(dict(fig.get("layout", {}))))
        return out

    def add_trace(self, trace: dict[str, Any]) -> Figure:
        """Append *trace* (made by :func:`trace`)."""
        self.data.append(trace)
        return self

    def update_layout(self, **props: Any) -> Figure:
        """Update the layout (nested dicts merged)."""
        _update(self.layout, props)
        return self

    def update_xaxes(self, **props: Any) -> Figure:
        """Update the x axis."""
        _update(self.layout, {"xaxis": props})
        return self

    def update_yaxes(self, **props: Any) -> Figure:
        """Update the y axis."""
        _update(self.layout, {"yaxis": props})
        return self

    def update_traces(self, **props: Any) -> Figure:
        """Update every trace (plotly applies a figure's trace edits in the alphabetical order of their names)."""
        for t in self.data:
            _update(t, props, by_name=True)
        return self

    def to_dict(self) -> dict[str, Any]:
        """Return ``{"data": ..., "layout": ...}`` as plotly writes it: numeric arrays as base64 typed arrays."""
        res = _tree_copy({"data": self.data, "layout": self.layout})
        convert_to_base64(res)
        return res

    to_plotly_json = to_dict


def _tree_copy(value: Any) -> Any:
    """Return *value* with its dicts and lists copied (arrays and scalars shared)."""
    if isinstance(value, dict):
        return {k: _tree_copy(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_tree_copy(v) for v in value]
    return value


def _sorted_lists(value: Any) -> Any:
    """Return *value* with the dicts inside lists (shapes, annotations) in alphabetical key order too."""
    if isinstance(value, dict):
        return {k: _sorted_lists(v) for k, v in value.items()}
    if isinstance(value, list) and value and all(isinstance(v, dict) for v in value):
        return [_whole(_sorted_lists(v)) for v in value]
    return value


#: figure keys whose strings are written by the program as plotly markup (they may hold
#: ``<br>`` and ``<extra>``, and the values they show are escaped); every other string is data.
MARKUP_KEYS = frozenset({"hovertemplate", "texttemplate", "template"})


def _escape_tree(value: Any) -> Any:
    """Return *value* with every string HTML-escaped (numbers, dates and booleans unchanged)."""
    if isinstance(value, str):
        return html.escape(value, quote=False)
    if isinstance(value, dict):
        return {k: (v if k in MARKUP_KEYS else _escape_tree(v)) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_escape_tree(v) for v in value]
    if isinstance(value, np.ndarray) and value.dtype.kind in "OUS":
        return np.array([_escape_tree(v) for v in value.tolist()], dtype=object).reshape(value.shape)
    return value


def finalise(fig: Figure | go.Figure | dict) -> dict:
    """Return the figure as a dict with every text shown by the chart HTML-escaped.

    Plotly renders trace names, tick and category labels, hover text, annotations and
    titles as a small subset of HTML (``<b>``, ``<a href>`` ...), so a label typed in the
    records would be live markup inside the chart. Every string of the figure is escaped
    here (plotly shows ``&lt;`` as ``<``), except the program's own templates
    (``MARKUP_KEYS``). Every chart passes through this function before it is written.
    """
    data = fig.to_dict() if isinstance(fig, (Figure, go.Figure)) else dict(fig)
    return _escape_tree(data)


def figure_html(fig: Figure | go.Figure, div_id: str, height: int | str | None, config: Mapping[str, Any]) -> str:
    """Return the plot div and script of *fig* (escaped by :func:`finalise`); plotly.js is loaded by the page."""
    # numbers rounded to what every environment computes alike (generator/portable.py)
    return pio.to_html(round_floats(finalise(fig)), include_plotlyjs=False, full_html=False, div_id=div_id,
                       default_height=height, config=dict(config), validate=False)


def _values(seq: Any) -> list:
    """Return *seq* as a JSON-friendly list (NaN -> None, numpy scalars -> Python)."""
    if seq is None:
        return []
    if isinstance(seq, (pd.Series, pd.Index)):
        seq = seq.tolist()
    elif isinstance(seq, np.ndarray):
        seq = seq.tolist()
    out = []
    for v in seq:
        if isinstance(v, np.generic):
            v = v.item()
        if isinstance(v, float) and math.isnan(v):
            v = None
        elif isinstance(v, pd.Timestamp):
            v = None if pd.isna(v) else v.strftime("%Y-%m-%d")
        elif v is pd.NaT:
            v = None
        out.append(v)
    return out


def base_layout(fig: Figure, title: str | None = None, height: int = 420,
                xaxis_title: str | None = None, yaxis_title: str | None = None) -> Figure:
    """Apply the common layout (title, height, axis titles) to *fig* and return it."""
    fig.update_layout(height=height)
    if title:
        fig.update_layout(title=dict(text=title))
    if xaxis_title is not None:
        fig.update_xaxes(title=dict(text=xaxis_title))
    if yaxis_title is not None:
        fig.update_yaxes(title=dict(text=yaxis_title))
    return fig


def bar(x: Sequence, y: Sequence, *, name: str | None = None, title: str | None = None,
        xaxis_title: str | None = None, yaxis_title: str | None = None, horizontal: bool = False,
        text: Sequence | None = None, colour: str | None = None, height: int = 420) -> Figure:
    """Return a single-series bar chart."""
    xs, ys = _values(x), _values(y)
    kw: dict[str, Any] = dict(name=name or "", showlegend=bool(name))
    if text is not None:
        kw.update(text=_values(text), textposition="auto")
    if colour:
        kw["marker"] = dict(color=colour)
    fig = Figure(trace("bar", x=ys, y=xs, orientation="h", **kw) if horizontal else trace("bar", x=xs, y=ys, **kw))
    if horizontal:
        fig.update_yaxes(autorange="reversed")
    return base_layout(fig, title, height, xaxis_title, yaxis_title)


def _multi_bar(categories: Sequence, series: Mapping[str, Sequence], mode: str, title: str | None,
               xaxis_title: str | None, yaxis_title: str | None, horizontal: bool, height: int,
               colours: Mapping[str, str] | None) -> Figure:
    cats = _values(categories)
    fig = Figure()
    for i, (label, vals) in enumerate(series.items()):
        colour = (colours or {}).get(label, PALETTE[i % len(PALETTE)])
        vs = _values(vals)
        if horizontal:
            fig.add_trace(trace("bar", x=vs, y=cats, name=str(label), orientation="h", marker=dict(color=colour)))
        else:
            fig.add_trace(trace("bar", x=cats, y=vs, name=str(label), marker=dict(color=colour)))
    fig.update_layout(barmode=mode)
    if horizontal:
        fig.update_yaxes(autorange="reversed")
    return base_layout(fig, title, height, xaxis_title, yaxis_title)


def grouped_bar(categories: Sequence, series: Mapping[str, Sequence], *, title: str | None = None,
                xaxis_title: str | None = None, yaxis_title: str | None = None,
                horizontal: bool = False, height: int = 420,
                colours: Mapping[str, str] | None = None) -> Figure:
    """Return a bar chart with one bar per series side by side in each category."""
    return _multi_bar(categories, series, "group", title, xaxis_title, yaxis_title, horizontal,
                      height, colours)


def stacked_bar(categories: Sequence, series: Mapping[str, Sequence], *, title: str | None = None,
                xaxis_title: str | None = None, yaxis_title: str | None = None,
                horizontal: bool = False, height: int = 420,
                colours: Mapping[str, str] | None = None) -> Figure:
    """Return a bar chart with the series stacked in each category."""
    return _multi_bar(categories, series, "stack", title, xaxis_title, yaxis_title, horizontal,
                      height, colours)


def box_from_stats(stats: pd.DataFrame, *, label: str = "label", title: str | None = None,
                   xaxis_title: str | None = None, yaxis_title: str | None = None,
                   height: int = 420, name: str | None = None) -> Figure:
    """Return a box plot drawn from precomputed quartiles.

    *stats* has one row per box with columns *label*, ``q1``, ``median``, ``q3`` and
    optionally ``lowerfence``, ``upperfence`` (whiskers; default: the quartiles) and
    ``mean``.
    """
    labels = _values(stats[label])
    q1, med, q3 = (_values(stats[c]) for c in ("q1", "median", "q3"))
    lo = _values(stats["lowerfence"]) if "lowerfence" in stats else q1
    hi = _values(stats["upperfence"]) if "upperfence" in stats else q3
    kw: dict[str, Any] = {}
    if "mean" in stats:
        kw["mean"] = _values(stats["mean"])
    fig = Figure(trace("box", x=labels, q1=q1, median=med, q3=q3, lowerfence=lo, upperfence=hi,
                       name=name or "", showlegend=bool(name), boxpoints=False, **kw))
    return base_layout(fig, title, height, xaxis_title, yaxis_title)


def line(x: Sequence, series: Mapping[str, Sequence], *, title: str | None = None,
         xaxis_title: str | None = None, yaxis_title: str | None = None, height: int = 420,
         markers: bool = True, colours: Mapping[str, str] | None = None) -> Figure:
    """Return a line chart with one line per series over the shared *x*."""
    xs = _values(x)
    fig = Figure()
    for i, (label, vals) in enumerate(series.items()):
        colour = (colours or {}).get(label, PALETTE[i % len(PALETTE)])
        fig.add_trace(trace("scatter", x=xs, y=_values(vals), name=str(label),
                            mode="lines+markers" if markers else "lines", line=dict(color=colour)))
    return base_layout(fig, title, height, xaxis_title, yaxis_title)


def scatter(x: Sequence, y: Sequence, *, text: Sequence | None = None, name: str | None = None,
            title: str | None = None, xaxis_title: str | None = None,
            yaxis_title: str | None = None, height: int = 420, colour: str | None = None,
            size: float = 8) -> Figure:
    """Return a scatter chart of (x, y) points (aggregate points, never raw records)."""
    kw: dict[str, Any] = dict(mode="markers", name=name or "", showlegend=bool(name),
                              marker=dict(size=size, color=colour or PALETTE[0]))
    if text is not None:
        kw.update(text=_values(text), hovertemplate="%{text}<br>%{x}, %{y}<extra></extra>")
    fig = Figure(trace("scatter", x=_values(x), y=_values(y), **kw))
    return base_layout(fig, title, height, xaxis_title, yaxis_title)


def reference_lines(fig: Figure, values: Mapping[str, float | None], axis: str = "y",
                    colour: str = REFERENCE_COLOUR) -> Figure:
    """Draw a labelled dashed line across the plot at each level of *values* and return *fig*.

    The shapes and labels are those of plotly's ``add_hline``/``add_vline`` with the label at
    the top left or right of the line.
    """
    # labels alternate sides so that close values stay readable
    had = "shapes" in fig.layout
    shapes = fig.layout.setdefault("shapes", [])
    notes = None
    for i, (label, level) in enumerate(sorted(values.items(), key=lambda kv: (kv[1] is None, kv[1] or 0, kv[0]))):
        if level is None or (isinstance(level, float) and math.isnan(level)):
            continue
        v = float(level)
        line = dict(color=colour, dash="dash", width=1)
        font = dict(color=colour, size=11)
        if axis == "y":
            right = bool(i % 2)
            shapes.append(_whole(dict(type="line", line=line, x0=0, x1=1, xref="x domain", y0=v, y1=v, yref="y")))
            note = dict(font=font, showarrow=False, text=str(label), x=1 if right else 0,
                        xanchor="right" if right else "left", xref="x domain", y=v, yanchor="bottom", yref="y")
        else:
            left = bool(i % 2)
            shapes.append(_whole(dict(type="line", line=line, x0=v, x1=v, xref="x", y0=0, y1=1, yref="y domain")))
            note = dict(font=font, showarrow=False, text=str(label), x=v, xanchor="right" if left else "left",
                        xref="x", y=1, yanchor="top", yref="y domain")
        notes = fig.layout.setdefault("annotations", []) if notes is None else notes
        notes.append(_whole(note))
    if not had and not shapes:
        del fig.layout["shapes"]
    return fig


Formatter = Callable[[Any], str]


def _formatter(spec: str | Formatter | None) -> Formatter:
    if callable(spec):
        return spec
    if spec is None:
        return _default_cell
    fmt = spec if "{" in spec else "{:" + spec + "}"

    def f(v: Any) -> str:
        if v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NaT:
            return BLANK
        try:
            return fmt.format(v)
        except (ValueError, TypeError):
            return str(v)
    return f


def _default_cell(v: Any) -> str:
    if v is None or v is pd.NaT:
        return BLANK
    if isinstance(v, np.generic):
        v = v.item()
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float):
        if math.isnan(v):
            return BLANK
        return f"{v:.1f}"
    if isinstance(v, pd.Timestamp):
        return v.strftime("%Y-%m-%d")
    return str(v)


def format_cells(values: pd.Series, spec: str | Formatter | None = None) -> list[str]:
    """Return the formatted cells of one column (dates as YYYY-MM-DD, blanks as a dash)."""
    f = _formatter(spec)
    if pd.api.types.is_datetime64_any_dtype(values):
        texts = values.dt.strftime("%Y-%m-%d")
        return [BLANK if pd.isna(t) else str(t) for t in texts]
    return [f(v) for v in values.tolist()]


def table_from_frame(df: pd.DataFrame, columns: Sequence[str] | Mapping[str, str],
                     formats: Mapping[str, str | Formatter] | None = None,
                     caption: str = "") -> Table:
    """Return a :class:`Table` of *columns* of *df* with cells formatted.

    *columns* is a list of column names or a mapping column -> header label; *formats*
    maps a column to a format spec (``".1f"``, ``"{:,.0f} h"``) or a function. Numbers
    without a format get one decimal (dB); missing values show a dash.
    """
    formats = dict(formats or {})
    labels = dict(columns) if isinstance(columns, Mapping) else {c: c for c in columns}
    cols = list(labels)
    cells = [format_cells(df[c], formats.get(c)) for c in cols]
    rows = [list(r) for r in zip(*cells)] if cols else []
    classes = ["num" if (pd.api.types.is_numeric_dtype(df[c]) and not pd.api.types.is_bool_dtype(df[c]))
               else "" for c in cols]
    return Table(columns=[labels[c] for c in cols], rows=rows, caption=caption, classes=classes)
