"""The report's figures, each drawn on a `Figure` of its own and returned as PNG bytes.

Matplotlib's Agg canvas is used directly (pyplot's global state is never touched), at a fixed
resolution and with the PNG's ``Software`` stamp removed, so the same tables give the same
bytes.
"""

from __future__ import annotations

import io
import math

import geopandas as gpd
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.cm import ScalarMappable
from matplotlib.colors import Normalize
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, PercentFormatter

from ._tables import wilson_interval

DPI = 96
GRID = "#d9d9d9"
INK = "#333333"
CAUSE_COLOURS = {
    "churn": "#b03a2e",
    "move_out": "#1f618d",
    "other_exit": "#7b7d7d",
}
UPTAKE_COLOUR = "#1e8449"
SERIES = ["#1f618d", "#b03a2e", "#1e8449", "#b9770e", "#6c3483", "#148f77", "#7b7d7d", "#2e4053"]
#: Line styles and markers, so that series differ by more than colour (k-th series: k-th style).
LINE_STYLES = ["-", "--", ":", "-."]
MARKERS = ["o", "s", "^", "D", "v", "P", "X", "*"]
HATCHES = ["", "//", "..", "xx", "\\\\", "++", "oo", "--"]
MAX_POINTS = 40
"""Tenure hazards are grouped into bands so that a curve has at most this many points."""
MIN_BAND_AT_RISK = 100
"""Tenure bands with fewer customer-months at risk than this are left off the chart."""
HR_AXIS = (0.05, 20.0)
"""Hazard-ratio axis limits at most; wider intervals are cut at the edge, with an arrow."""


def new_figure(width: float, height: float) -> Figure:
    """A figure with its own Agg canvas and constrained layout."""
    fig = Figure(figsize=(width, height), dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def png_bytes(fig: Figure) -> bytes:
    """The figure as PNG at the fixed resolution, without the software stamp."""
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=DPI, metadata={"Software": None})
    return buffer.getvalue()


def colour_of(cause: str) -> str:
    return CAUSE_COLOURS.get(cause, UPTAKE_COLOUR)


def label_of(cause: str) -> str:
    """Plain words for a cause name."""
    if cause.startswith("uptake_"):
        return f"uptake of {cause.removeprefix('uptake_')}"
    return {"churn": "churn", "move_out": "move-out", "other_exit": "other exits"}.get(cause, cause)


def _tidy(ax: object) -> None:
    ax.grid(axis="y", color=GRID, linewidth=0.8)  # type: ignore[attr-defined]
    ax.set_axisbelow(True)  # type: ignore[attr-defined]
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)  # type: ignore[attr-defined]


# -- portfolio -------------------------------------------------------------------------------
def portfolio_trend(portfolio: pd.DataFrame, causes: list[str], months: int = 25) -> bytes:
    """Monthly rate of each cause (events / customers active in the month), last months."""
    recent = portfolio.tail(months)
    fig = new_figure(9.0, 3.6)
    ax = fig.add_subplot()
    x = np.arange(len(recent))
    uptakes = [c for c in causes if c.startswith("uptake_")]
    for k, cause in enumerate(causes):
        rate = recent[cause].to_numpy(float) / recent["customers"].to_numpy(float)
        colour = colour_of(cause)
        if cause in uptakes:  # each product its own colour too
            colour = [UPTAKE_COLOUR, *SERIES[3:]][uptakes.index(cause) % (len(SERIES) - 2)]
        ax.plot(
            x,
            rate,
            LINE_STYLES[k % len(LINE_STYLES)],
            color=colour,
            marker=MARKERS[k % len(MARKERS)],
            ms=3.5,
            label=label_of(cause),
        )
    step = max(1, len(x) // 12)
    ticks = x[::-1][::step][::-1]
    ax.set_xticks(ticks, recent["month"].to_numpy()[ticks], rotation=45, ha="right")
    ax.yaxis.set_major_formatter(PercentFormatter(1.0, decimals=None))
    ax.set_ylabel("share of customers in the month")
    ax.set_title("Monthly exit and uptake rates", loc="left")
    ax.legend(frameon=False, ncols=min(4, len(causes)), loc="upper left", fontsize=8)
    ax.set_ylim(bottom=0)
    _tidy(ax)
    return png_bytes(fig)


# -- tenure ----------------------------------------------------------------------------------
def banded_hazards(table: pd.DataFrame) -> tuple[pd.DataFrame, int]:
    """One cause's tenure counts grouped into bands of equal width (≤ `MAX_POINTS` bands).

    Band b of width w holds tenure months ``(b−1)·w + 1 … b·w``; its hazard is the pooled
    ``Σ events / Σ at_risk`` (per customer-month), with Wilson's 95 % interval.
    """
    longest = int(table["tenure"].max())
    width = max(1, math.ceil(longest / MAX_POINTS))
    band = (table["tenure"].to_numpy(np.int64) - 1) // width
    grouped = table.groupby(band)[["at_risk", "events"]].sum()
    lower, upper = wilson_interval(grouped["events"].to_numpy(), grouped["at_risk"].to_numpy())
    out = pd.DataFrame(
        {
            "first": grouped.index.to_numpy() * width + 1,
            "last": (grouped.index.to_numpy() + 1) * width,
            "at_risk": grouped["at_risk"].to_numpy(),
            "events": grouped["events"].to_numpy(),
        }
    )
    out["hazard"] = out["events"] / out["at_risk"]
    out["lower"], out["upper"] = lower, upper
    return out, width


def tenure_chart(tenure_hazards: pd.DataFrame) -> bytes:
    """Monthly hazard by tenure per cause, with Wilson 95 % intervals (one panel per cause)."""
    causes = list(dict.fromkeys(tenure_hazards["cause"]))
    cols = min(2, len(causes))
    rows = math.ceil(len(causes) / cols)
    fig = new_figure(9.0, 2.9 * rows)
    axes = fig.subplots(rows, cols, squeeze=False)
    for i, cause in enumerate(causes):
        ax = axes[i // cols][i % cols]
        bands, width = banded_hazards(tenure_hazards[tenure_hazards["cause"] == cause])
        bands = bands[bands["at_risk"] >= MIN_BAND_AT_RISK]
        mid = (bands["first"] + bands["last"]) / 2.0
        colour = colour_of(cause)
        ax.fill_between(mid, bands["lower"], bands["upper"], color=colour, alpha=0.2, lw=0)
        ax.plot(mid, bands["hazard"], color=colour, marker="o", ms=2.5, lw=1.4)
        ax.yaxis.set_major_formatter(PercentFormatter(1.0, decimals=2))
        ax.set_xlabel("tenure (months)" + (f", bands of {width}" if width > 1 else ""))
        ax.set_title(label_of(cause), loc="left", fontsize=10)
        ax.set_ylim(bottom=0)
        _tidy(ax)
    for j in range(len(causes), rows * cols):
        axes[j // cols][j % cols].set_visible(False)
    fig.suptitle(
        f"Monthly hazard by tenure (shaded: 95 % interval; bands with under {MIN_BAND_AT_RISK} "
        "customer-months left off)",
        x=0.01,
        ha="left",
    )
    return png_bytes(fig)


def incidence_chart(incidence: pd.DataFrame, segment_column: str) -> bytes:
    """Observed cumulative incidence by tenure, one line per segment, one panel per cause."""
    causes = list(dict.fromkeys(incidence["cause"]))
    segments = sorted(incidence["segment"].astype(str).unique())
    fig = new_figure(9.0, 3.2)
    axes = fig.subplots(1, len(causes), squeeze=False)[0]
    for ax, cause in zip(axes, causes, strict=True):
        part = incidence[incidence["cause"] == cause]
        for k, segment in enumerate(segments):
            line = part[part["segment"].astype(str) == segment]
            ax.step(
                np.r_[0, line["tenure"].to_numpy()],
                np.r_[0.0, line["incidence"].to_numpy(float)],
                where="post",
                color=SERIES[k % len(SERIES)],
                ls=LINE_STYLES[k % len(LINE_STYLES)],
                lw=1.5,
                label=segment,
            )
        ax.yaxis.set_major_formatter(PercentFormatter(1.0, decimals=0))
        ax.set_xlabel("tenure (months)")
        ax.set_title(label_of(cause), loc="left", fontsize=10)
        ax.set_ylim(bottom=0)
        _tidy(ax)
    axes[0].set_ylabel("cumulative incidence")
    if len(segments) > 1:
        axes[-1].legend(title=segment_column, frameon=False, fontsize=8, title_fontsize=8)
    fig.suptitle(incidence_title(segment_column), x=0.01, ha="left")
    return png_bytes(fig)


def incidence_title(segment_column: str) -> str:
    """ "Cumulative incidence by plan_speed", or "…, all customers" without segments."""
    if segment_column == "all customers":
        return "Cumulative incidence, all customers"
    return f"Cumulative incidence by {segment_column}"


# -- risk map --------------------------------------------------------------------------------
def risk_map(areas: gpd.GeoDataFrame, area_risk: pd.DataFrame, columns: list[str]) -> bytes:
    """Areas shaded by each mean predicted probability, legend in probabilities (%).

    One map a row; each area is labelled with its ``area_name`` when the areas have one,
    else its ``area_id``; the colour bar's ticks carry as many decimals as they need to differ.
    """
    joined = areas.merge(area_risk, on="area_id", how="left")
    names = joined["area_name"] if "area_name" in joined else joined["area_id"]
    fig = new_figure(8.0, 6.0 * len(columns))
    axes = fig.subplots(len(columns), 1, squeeze=False)[:, 0]
    for ax, column in zip(axes, columns, strict=True):
        values = joined[column].to_numpy(float)
        finite = values[np.isfinite(values)]
        low = float(finite.min()) if finite.size else 0.0
        high = float(finite.max()) if finite.size else 1.0
        if high <= low:
            high = low + 1e-6
        norm = Normalize(vmin=low, vmax=high)
        cmap = "Reds" if "churn" in column else "Blues"
        joined.plot(
            column=column,
            ax=ax,
            cmap=cmap,
            norm=norm,
            edgecolor="white",
            linewidth=0.6,
            missing_kwds={"color": "#eeeeee", "label": "no customers"},
        )
        ax.set_axis_off()
        ax.set_aspect("equal")
        ax.set_title(risk_title(column), loc="left", fontsize=10)
        _label_areas(ax, joined, names)
        bar = fig.colorbar(ScalarMappable(norm=norm, cmap=cmap), ax=ax, shrink=0.8)
        ticks = bar.get_ticks()
        ticks = ticks[(ticks >= low) & (ticks <= high)]
        bar.set_ticks(ticks)
        bar.ax.yaxis.set_major_formatter(PercentFormatter(1.0, decimals=distinct_decimals(ticks)))
        bar.set_label("mean predicted probability")
    return png_bytes(fig)


def _label_areas(ax: object, areas: gpd.GeoDataFrame, names: pd.Series) -> None:
    """Each area's name at a point inside it, small, on a white halo."""
    from matplotlib import patheffects

    halo = [patheffects.withStroke(linewidth=2.0, foreground="white")]
    points = areas.geometry.representative_point()
    for point, name in zip(points, names.astype(str), strict=True):
        if point is None or point.is_empty:
            continue
        ax.annotate(  # type: ignore[attr-defined]
            name, (point.x, point.y), ha="center", va="center", fontsize=5.5, color=INK,
            path_effects=halo,
        )  # fmt: skip


def distinct_decimals(ticks: np.ndarray, most: int = 4) -> int:
    """The fewest decimals (0..``most``) at which the ticks, shown as percentages, differ."""
    ticks = np.asarray(ticks, dtype=float)
    for decimals in range(most + 1):
        shown = {f"{100.0 * t:.{decimals}f}" for t in ticks}
        if len(shown) == len(ticks):
            return decimals
    return most


def risk_title(column: str) -> str:
    """Plain words for a score column: ``cif_churn_3m`` → "churn within 3 months"."""
    parts = column.removeprefix("cif_").rsplit("_", 1)
    if len(parts) == 2 and parts[1].endswith("m"):
        return f"{label_of(parts[0])} within {parts[1][:-1]} months"
    return column


# -- accuracy --------------------------------------------------------------------------------
def decile_chart(deciles: pd.DataFrame, cause: str) -> bytes:
    """Mean predicted against realised share by risk decile; realised with Wilson 95 %."""
    fig = new_figure(7.5, 3.4)
    ax = fig.add_subplot()
    d = deciles.sort_values("decile")
    x = d["decile"].to_numpy(float)
    n = d["n"].to_numpy(float)
    realised = d["realised"].to_numpy(float)
    lower, upper = wilson_interval(np.round(realised * n), n)
    ax.bar(x, d["predicted"].to_numpy(float), width=0.7, color="#aab7b8", label="predicted")
    ax.errorbar(
        x,
        realised,
        yerr=[np.clip(realised - lower, 0, None), np.clip(upper - realised, 0, None)],
        fmt="o",
        color=colour_of(cause),
        ms=5,
        capsize=3,
        label="realised (95 % interval)",
    )
    ax.set_xticks(x, [str(int(v)) for v in x])
    ax.set_xlabel("risk decile (10 = highest predicted risk)")
    ax.yaxis.set_major_formatter(PercentFormatter(1.0, decimals=1))
    ax.set_title(
        f"Last month's predictions of {label_of(cause)}: predicted vs realised", loc="left"
    )
    ax.legend(frameon=False, loc="upper left", fontsize=8)
    _tidy(ax)
    return png_bytes(fig)


# -- drivers ---------------------------------------------------------------------------------
def hazard_ratio_chart(table: pd.DataFrame) -> bytes:
    """Dot-and-whisker plot of hazard ratios with 95 % intervals, log scale, per cause.

    The axis spans the intervals but at most `HR_AXIS`; an interval reaching past an edge is
    drawn to the edge and ends in an arrow head.
    """
    causes = list(dict.fromkeys(table["cause"]))
    features = list(dict.fromkeys(table["feature"]))[::-1]
    position = {f: i for i, f in enumerate(features)}
    values = table[["hazard_ratio", "lower_95", "upper_95"]].to_numpy(float)
    usable = np.all(np.isfinite(values) & (values > 0), axis=1)
    low = max(HR_AXIS[0], float(values[usable].min()) / 1.2) if usable.any() else HR_AXIS[0]
    high = min(HR_AXIS[1], float(values[usable].max()) * 1.2) if usable.any() else HR_AXIS[1]
    low, high = min(low, 0.8), max(high, 1.25)
    fig = new_figure(min(3.2 * len(causes) + 2.4, 13.0), 0.27 * len(features) + 1.4)
    axes = fig.subplots(1, len(causes), squeeze=False, sharey=True)[0]
    for ax, cause in zip(axes, causes, strict=True):
        mine = (table["cause"] == cause).to_numpy() & usable
        part = table[mine]
        y = part["feature"].map(position).to_numpy(float)
        hr = np.clip(part["hazard_ratio"].to_numpy(float), low, high)
        lo = np.clip(part["lower_95"].to_numpy(float), low, high)
        hi = np.clip(part["upper_95"].to_numpy(float), low, high)
        colour = colour_of(cause)
        ax.hlines(y, lo, hi, color=colour, lw=1.4)
        ax.plot(hr, y, "o", color=colour, ms=4)
        cut_low = part["lower_95"].to_numpy(float) < low
        cut_high = part["upper_95"].to_numpy(float) > high
        ax.plot(lo[cut_low], y[cut_low], "<", color=colour, ms=5)
        ax.plot(hi[cut_high], y[cut_high], ">", color=colour, ms=5)
        ax.axvline(1.0, color=INK, lw=0.8, ls=":")
        ax.set_xscale("log")
        ax.set_xlim(low, high)
        ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
        ax.xaxis.set_minor_formatter(FuncFormatter(lambda v, _: ""))
        ax.set_title(label_of(cause), loc="left", fontsize=10)
        ax.set_xlabel("hazard ratio")
        ax.grid(axis="x", color=GRID, linewidth=0.6)
    axes[0].set_yticks(range(len(features)), features, fontsize=8)
    axes[0].set_ylim(-0.7, len(features) - 0.3)
    fig.suptitle(
        "Hazard ratios with 95 % intervals (log scale; 1 = no effect; arrows: interval "
        "continues past the axis)",
        x=0.01,
        ha="left",
    )
    return png_bytes(fig)


def importance_chart(table: pd.DataFrame, top: int = 12) -> bytes:
    """Forest importances: the ``top`` features of each cause as horizontal bars."""
    causes = list(dict.fromkeys(table["cause"]))
    cols = min(2, len(causes))
    rows = math.ceil(len(causes) / cols)
    fig = new_figure(9.0, (0.22 * top + 1.0) * rows)
    axes = fig.subplots(rows, cols, squeeze=False)
    for i, cause in enumerate(causes):
        ax = axes[i // cols][i % cols]
        part = table[table["cause"] == cause].sort_values(
            ["importance", "feature"], ascending=[False, True], kind="stable"
        )
        part = part.head(top)[::-1]
        ax.barh(range(len(part)), part["importance"].to_numpy(float), color=colour_of(cause))
        ax.set_yticks(range(len(part)), part["feature"].tolist(), fontsize=8)
        ax.axvline(0.0, color=INK, lw=0.6)
        ax.set_title(label_of(cause), loc="left", fontsize=10)
        ax.grid(axis="x", color=GRID, linewidth=0.6)
    for j in range(len(causes), rows * cols):
        axes[j // cols][j % cols].set_visible(False)
    fig.suptitle(
        "Forest importances (drop in accuracy when a feature is shuffled)", x=0.01, ha="left"
    )
    return png_bytes(fig)


# -- drift -----------------------------------------------------------------------------------
def drift_chart(drift: pd.DataFrame, watch: float, act: float) -> bytes:
    """PSI of each variable as bars, with the watch and act thresholds."""
    d = drift.iloc[::-1]
    colours = np.where(
        d["psi"] >= act, "#b03a2e", np.where(d["psi"] >= watch, "#b9770e", "#7fb3d5")
    )
    fig = new_figure(8.0, 0.24 * len(d) + 1.3)
    ax = fig.add_subplot()
    ax.barh(range(len(d)), d["psi"].to_numpy(float), color=colours)
    labels = [f"{v} ({k})" for v, k in zip(d["variable"], d["kind"], strict=True)]
    ax.set_yticks(range(len(d)), labels, fontsize=8)
    ax.axvline(watch, color="#b9770e", ls="--", lw=1, label=f"watch ({watch:g})")
    ax.axvline(act, color="#b03a2e", ls="--", lw=1, label=f"act ({act:g})")
    ax.set_xlabel("population stability index against last month")
    ax.set_xlim(0, max(act * 1.2, float(d["psi"].max()) * 1.05))
    ax.legend(frameon=False, fontsize=8, loc="lower right")
    ax.grid(axis="x", color=GRID, linewidth=0.6)
    return png_bytes(fig)


# -- plan ------------------------------------------------------------------------------------
def schedule_chart(plan: pd.DataFrame) -> bytes:
    """Contacts per week, stacked by offer."""
    counts = plan.groupby(["week", "offer"]).size().unstack("offer", fill_value=0).sort_index()
    fig = new_figure(7.0, 3.0)
    ax = fig.add_subplot()
    bottom = np.zeros(len(counts))
    for k, offer in enumerate(counts.columns):
        values = counts[offer].to_numpy(float)
        ax.bar(
            counts.index.astype(str),
            values,
            bottom=bottom,
            color=SERIES[k % len(SERIES)],
            hatch=HATCHES[k % len(HATCHES)],
            edgecolor="white",
            label=offer,
        )
        bottom += values
    ax.set_xlabel("week")
    ax.set_ylabel("contacts")
    ax.set_title("Weekly schedule", loc="left")
    ax.legend(frameon=False, fontsize=8)
    _tidy(ax)
    return png_bytes(fig)


def offer_rate_chart(rates: pd.DataFrame, attribute: str | None) -> bytes:
    """Contact rate per area against the portfolio's rate (areas ordered by ``attribute``)."""
    order = [attribute, "area_id"] if attribute else ["area_id"]
    r = rates.sort_values(order, kind="stable")
    overall = r["contacts"].sum() / r["customers"].sum()
    fig = new_figure(9.0, 3.3)
    ax = fig.add_subplot()
    x = np.arange(len(r))
    ax.bar(x, r["contact_rate"].to_numpy(float), color="#5d6d7e", width=0.75)
    ax.axhline(overall, color="#b03a2e", ls="--", lw=1, label=f"all areas ({overall:.1%})")
    step = max(1, len(r) // 30)
    ax.set_xticks(x[::step], r["area_id"].to_numpy()[::step], rotation=90, fontsize=7)
    ax.yaxis.set_major_formatter(PercentFormatter(1.0, decimals=1))
    ax.set_ylabel("customers contacted")
    where = f"areas ordered by {attribute}" if attribute else "areas"
    ax.set_title(f"Share of each area's customers in the plan ({where})", loc="left")
    ax.legend(frameon=False, fontsize=8)
    _tidy(ax)
    return png_bytes(fig)
