"""Charts are written as plain JSON: each helper gives byte for byte the page plotly's own figure objects give.

plotly (a general-purpose plotting library) is the oracle: the same chart is made with
``plotly.graph_objects`` (traces, ``update_layout``, ``update_xaxes``, ``update_traces``,
``add_hline``/``add_vline``) and both are written by ``charts.figure_html``.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import plotly.graph_objects as go
import pytest

from generator import charts
from generator.privacy import redact_value


def _html(fig: object) -> str:
    return charts.figure_html(fig, "c-1", 420, {"displaylogo": False})  # type: ignore[arg-type]


def _plotly_layout(fig: go.Figure, title: str | None, height: int, xt: str | None, yt: str | None) -> go.Figure:
    fig.update_layout(height=height)
    if title:
        fig.update_layout(title=dict(text=title))
    if xt is not None:
        fig.update_xaxes(title_text=xt)
    if yt is not None:
        fig.update_yaxes(title_text=yt)
    return fig


def test_bar_charts_match_plotly() -> None:
    ours = charts.bar(["a", "<b>b</b>"], [1, 2.5], name="n", title="T", xaxis_title="x", yaxis_title="y",
                      text=["1", "2"], colour="#123456")
    ours.update_traces(width=0.9, hovertemplate="%{x}<extra></extra>")
    ours.update_yaxes(range=[0, 100], rangemode="tozero")
    theirs = go.Figure(go.Bar(x=["a", "<b>b</b>"], y=[1, 2.5], name="n", showlegend=True, text=["1", "2"],
                              textposition="auto", marker=dict(color="#123456")))
    _plotly_layout(theirs, "T", 420, "x", "y")
    theirs.update_traces(width=0.9, hovertemplate="%{x}<extra></extra>")
    theirs.update_yaxes(range=[0, 100], rangemode="tozero")
    assert _html(ours) == _html(theirs)

    ours = charts.bar(["a", "b"], [3, 4], horizontal=True, xaxis_title="n")
    theirs = go.Figure(go.Bar(x=[3, 4], y=["a", "b"], orientation="h", name="", showlegend=False))
    theirs.update_yaxes(autorange="reversed")
    _plotly_layout(theirs, None, 420, "n", None)
    assert _html(ours) == _html(theirs)


@pytest.mark.parametrize("horizontal", [False, True])
def test_grouped_and_stacked_bars_match_plotly(horizontal: bool) -> None:
    series = {"late": [1, None], "on time": [np.int64(2), 3.5]}
    for make, mode in ((charts.grouped_bar, "group"), (charts.stacked_bar, "stack")):
        ours = make(["G1", "G2"], series, horizontal=horizontal, yaxis_title="people", colours=charts.STATUS_COLOURS)
        theirs = go.Figure()
        for label, vals in series.items():
            vs = [None if v is None else (v.item() if isinstance(v, np.generic) else v) for v in vals]
            colour = charts.STATUS_COLOURS[label]
            if horizontal:
                theirs.add_trace(go.Bar(x=vs, y=["G1", "G2"], name=label, orientation="h", marker=dict(color=colour)))
            else:
                theirs.add_trace(go.Bar(x=["G1", "G2"], y=vs, name=label, marker=dict(color=colour)))
        theirs.update_layout(barmode=mode)
        if horizontal:
            theirs.update_yaxes(autorange="reversed")
        _plotly_layout(theirs, None, 420, None, "people")
        assert _html(ours) == _html(theirs)


def test_box_line_and_scatter_match_plotly() -> None:
    stats = pd.DataFrame({"label": ["G1", "G2"], "q1": [80.0, 82.0], "median": [84.0, 85.0], "q3": [88.0, 89.0],
                          "mean": [84.5, float("nan")]})
    ours = charts.box_from_stats(stats, name="spread", height=300)
    theirs = go.Figure(go.Box(x=["G1", "G2"], q1=[80.0, 82.0], median=[84.0, 85.0], q3=[88.0, 89.0],
                              lowerfence=[80.0, 82.0], upperfence=[88.0, 89.0], name="spread", showlegend=True,
                              boxpoints=False, mean=[84.5, None]))
    _plotly_layout(theirs, None, 300, None, None)
    assert _html(ours) == _html(theirs)

    ours = charts.line([2021, 2022], {"a": [1.0, 2.123456789012345], "b": [None, 3]}, markers=False,
                       xaxis_title="year")
    ours.update_xaxes(type="category")
    theirs = go.Figure()
    for i, (label, vals) in enumerate({"a": [1.0, 2.123456789012345], "b": [None, 3]}.items()):
        theirs.add_trace(go.Scatter(x=[2021, 2022], y=vals, name=label, mode="lines",
                                    line=dict(color=charts.PALETTE[i])))
    _plotly_layout(theirs, None, 420, "year", None)
    theirs.update_xaxes(type="category")
    assert _html(ours) == _html(theirs)

    ours = charts.scatter([1, 2], [3, 4], text=["p", "q"], name="pts", size=5)
    theirs = go.Figure(go.Scatter(x=[1, 2], y=[3, 4], mode="markers", name="pts", showlegend=True,
                                  marker=dict(size=5, color=charts.PALETTE[0]), text=["p", "q"],
                                  hovertemplate="%{text}<br>%{x}, %{y}<extra></extra>"))
    _plotly_layout(theirs, None, 420, None, None)
    assert _html(ours) == _html(theirs)


@pytest.mark.parametrize("axis", ["x", "y"])
def test_reference_lines_match_plotly_hline_and_vline(axis: str) -> None:
    values = {"limit 90": 90.0, "action 85": 85, "unset": None, "nan": float("nan"), "target 65": 65.0}
    ours = charts.reference_lines(charts.bar([60, 70], [1, 2]), values, axis=axis)
    theirs = go.Figure(go.Bar(x=[60, 70], y=[1, 2], name="", showlegend=False))
    _plotly_layout(theirs, None, 420, None, None)
    for i, (label, level) in enumerate(sorted(values.items(), key=lambda kv: (kv[1] is None, kv[1] or 0, kv[0]))):
        if level is None or (isinstance(level, float) and math.isnan(level)):
            continue
        common = dict(line=dict(color=charts.REFERENCE_COLOUR, dash="dash", width=1), annotation_text=label,
                      annotation_font=dict(color=charts.REFERENCE_COLOUR, size=11))
        if axis == "y":
            theirs.add_hline(y=float(level), annotation_position="top right" if i % 2 else "top left", **common)
        else:
            theirs.add_vline(x=float(level), annotation_position="top left" if i % 2 else "top right", **common)
    assert _html(ours) == _html(theirs)
    # no level: no shapes at all
    assert "shapes" not in charts.reference_lines(charts.bar([1], [1]), {"a": None}).layout


def test_traces_with_arrays_nested_properties_and_layout_lists_match_plotly() -> None:
    x = np.array(["2020-01-01T00:00:00", "2020-01-01T00:01:00"], dtype=object)
    props = dict(x=x, y=np.array([91.7, 92.25]), mode="lines", name="LAeq",
                 line=dict(color="#000000", width=1, dash=None),
                 error_y=dict(type="data", symmetric=False, array=[0.5, 1.0], arrayminus=[0.0, 0.0]))
    counts = dict(x=[["OSHA", "OSHA"], ["<85", "85-90"]], y=np.array([3, 400], dtype=np.int64), name="OSHA")
    ours = charts.Figure(charts.trace("scatter", **props)).add_trace(charts.trace("bar", **counts))
    theirs = go.Figure(go.Scatter(**props)).add_trace(go.Bar(**counts))
    shapes = [dict(type="line", xref="paper", x0=0, x1=1, yref="y", y0=85.0, y1=85.0,
                   line=dict(color="#8a1c1c", dash="dash", width=1))]
    notes = [dict(xref="paper", x=0.0, xanchor="left", yref="y", y=85.0, yanchor="bottom", text="a <b>",
                  showarrow=False, font=dict(color="#8a1c1c", size=11))]
    for fig in (ours, theirs):
        fig.update_layout(height=360, shapes=shapes, annotations=notes)
        fig.update_xaxes(type="log", tickvals=[500, 1000], ticktext=["500", "1k"], title=dict(text="Hz"))
        fig.update_yaxes(autorange="reversed", title=dict(text="dB"), dtick=10, scaleanchor="x", scaleratio=1)
    assert _html(ours) == _html(theirs)


def test_a_redacted_chart_is_rebuilt_as_plotly_rebuilds_it() -> None:
    # a text changed by the redactor: the figure is made again from the whole dict, keys in plotly's order
    def make(fig: object) -> object:
        fig.add_trace(charts.trace("bar", x=["Ann", "B"], y=np.array([1.5, 2.0]), name="Ann")  # type: ignore[attr-defined]
                      if isinstance(fig, charts.Figure) else go.Bar(x=["Ann", "B"], y=np.array([1.5, 2.0]),
                                                                   name="Ann"))
        fig.update_layout(height=300, title=dict(text="t"))  # type: ignore[attr-defined]
        fig.update_yaxes(range=[0, 5])  # type: ignore[attr-defined]
        return fig

    def redact(text: str) -> str:
        return text.replace("Ann", "[name withheld]")

    ours = make(charts.Figure())
    theirs = make(go.Figure())
    charts.reference_lines(ours, {"a": 1.0})  # type: ignore[arg-type]
    theirs.add_hline(y=1.0, line=dict(color=charts.REFERENCE_COLOUR, dash="dash", width=1), annotation_text="a",
                     annotation_position="top left", annotation_font=dict(color=charts.REFERENCE_COLOUR, size=11))
    clean_ours, clean_theirs = redact_value(ours, redact), redact_value(theirs, redact)
    assert isinstance(clean_ours, charts.Figure) and isinstance(clean_theirs, go.Figure)
    assert _html(clean_ours) == _html(clean_theirs)
    assert "Ann" not in _html(clean_ours)
    # unchanged texts: the same figure back
    assert redact_value(ours, lambda t: t) is ours
