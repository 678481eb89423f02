"""The report read by a new analyst: named areas, distinct ticks, series told apart by more
than colour, no empty part, no awkward heading."""

from __future__ import annotations

import dataclasses

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

from lifecycle.report import _figures as fig
from lifecycle.report import render_report

from .test_report import _page, build_case


@pytest.fixture(scope="module")
def report_case(tmp_path_factory):
    return build_case(tmp_path_factory)  # built once, shared with test_report.py


def _captured(monkeypatch):
    """Make the figure functions return their Figure instead of PNG bytes."""
    monkeypatch.setattr(fig, "png_bytes", lambda figure: figure)


def test_colour_bar_ticks_get_the_decimals_they_need():
    assert fig.distinct_decimals(np.array([0.02, 0.04, 0.06])) == 0
    assert fig.distinct_decimals(np.array([0.023, 0.0235, 0.024])) == 2
    assert fig.distinct_decimals(np.array([0.1, 0.1])) == 4  # cannot differ: the most


def test_risk_map_labels_areas_by_name_with_distinct_ticks(monkeypatch):
    _captured(monkeypatch)
    boxes = [shapely.box(i, 0, i + 1, 1) for i in range(3)]
    areas = gpd.GeoDataFrame(
        {"area_id": ["A1", "A2", "A3"], "area_name": ["Quenbrook", "Tarrowdene", "Velmiston"]},
        geometry=boxes,
        crs="EPSG:32625",
    )
    risk = pd.DataFrame(
        {
            "area_id": ["A1", "A2", "A3"],
            "customers": [10, 10, 10],
            "cif_churn_3m": [0.0231, 0.0233, 0.0236],
        }
    )
    figure = fig.risk_map(areas, risk, ["cif_churn_3m"])
    texts = {t.get_text() for t in figure.axes[0].texts}
    assert texts == {"Quenbrook", "Tarrowdene", "Velmiston"}
    figure.canvas.draw()
    labels = [t.get_text() for t in figure.axes[1].get_yticklabels() if t.get_text()]
    assert len(labels) >= 2 and len(set(labels)) == len(labels)


def test_every_series_differs_by_more_than_colour(monkeypatch, report_case):
    _captured(monkeypatch)
    portfolio = report_case.inputs.portfolio.assign(uptake_leak_cover=3)
    causes = ["churn", "move_out", "uptake_backup_line", "uptake_leak_cover"]
    figure = fig.portfolio_trend(portfolio, causes)
    styles = [(line.get_linestyle(), line.get_marker()) for line in figure.axes[0].lines]
    colours = [line.get_color() for line in figure.axes[0].lines]
    assert len(set(styles)) == len(causes) and len(set(colours)) == len(causes)
    plan = pd.DataFrame({"week": [1, 1, 2], "offer": ["a", "b", "b"], "customer_id": [1, 2, 3]})
    bars = fig.schedule_chart(plan).axes[0].patches
    assert len({b.get_hatch() for b in bars}) == 2


def test_no_empty_forest_part_and_a_plain_heading_without_segments(report_case):
    inputs = dataclasses.replace(
        report_case.inputs,
        importances=None,
        segment_column="all customers",
        incidence=report_case.inputs.incidence.assign(segment="all customers"),
    )
    html, _ = render_report(inputs)
    assert "Forest importances" not in html and "No survival forest" not in html
    assert "Cumulative incidence, all customers" in html
    assert "by all customers" not in html
    # the demo's areas have names: the risk tables name them
    risk = _page(report_case.html).sections["risk-map"]["text"]
    names = report_case.inputs.areas["area_name"]
    assert any(f"{n} (" in risk for n in names)
