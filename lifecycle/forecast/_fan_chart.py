"""Fan chart of an uptake forecast: the expected count with its prediction bands, month by month.

Drawn with matplotlib's Agg canvas on a `Figure` of its own (pyplot's global state is never
touched), so it works without a display and in threads.
"""

from __future__ import annotations

import re
from pathlib import Path

import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from .._files import write_atomic
from ..errors import UsageError
from ._uptake import ALL_AREAS

_LINE = "#1f4e79"
_BAND = "#6b9ac4"
_GRID = "#d9d9d9"
_PAST = "#404040"


def fan_chart(
    forecast: pd.DataFrame,
    *,
    product: str | None = None,
    area_id: str = ALL_AREAS,
    cumulative: bool = False,
    title: str | None = None,
    history: pd.DataFrame | None = None,
) -> Figure:
    """A fan chart of one product and area from the frame of `forecast_uptake`.

    The line is the expected count; each ``lower_<L>``/``upper_<L>`` pair in the frame is a
    band, the widest the palest.

    Parameters
    ----------
    forecast
        The output of `forecast_uptake`.
    product
        The product to draw; may be left out when the frame holds one product.
    area_id
        The area (``"all"``: the total).
    cumulative
        Draw cumulative adopters instead of new adopters per month.
    title
        Title; a plain description by default.
    history
        Realised counts before the forecast (``month``, ``realised``, one row per month, e.g.
        the last 24 months), drawn to the left of the forecast as points; monthly charts only.

    Returns
    -------
    matplotlib.figure.Figure
    """
    product, rows, prefix, bands = _chosen_rows(forecast, product, area_id, cumulative)
    fig = Figure(figsize=(8.0, 4.5), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    past = None
    if history is not None and len(history) and not cumulative:
        past = history.sort_values("month")
    offset = len(past) if past is not None else 0
    _draw_forecast(ax, rows, prefix, bands, offset)
    labels = rows["month"].tolist()
    if past is not None:
        ax.plot(
            list(range(offset)),
            past["realised"].to_numpy(dtype=float),
            color=_PAST,
            linewidth=1.2,
            marker="s",
            markersize=3,
            label="realised",
        )
        ax.axvline(offset - 0.5, color=_GRID, linewidth=1.0)
        labels = [str(m) for m in past["month"]] + labels
    ticks = list(range(len(labels)))
    step = max(1, len(ticks) // 12)
    ax.set_xticks(ticks[::step], labels[::step], rotation=45, ha="right")
    ax.set_xlim(-0.3, len(ticks) - 0.7)
    ax.set_ylim(bottom=0)
    ax.set_xlabel("month")
    ax.set_ylabel("customers taking it up" + (" (cumulative)" if cumulative else " per month"))
    where = "all areas" if str(area_id) == ALL_AREAS else f"area {area_id}"
    what = "cumulative adopters" if cumulative else "new adopters per month"
    ax.set_title(title or f"{product}: {what}, {where}", loc="left")
    ax.grid(axis="y", color=_GRID, linewidth=0.8)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.legend(frameon=False, loc="best" if past is not None else "upper left")
    fig.tight_layout()
    return fig


def _chosen_rows(
    forecast: pd.DataFrame, product: str | None, area_id: str, cumulative: bool
) -> tuple[str, pd.DataFrame, str, list[tuple[str, str]]]:
    """The product, its rows for the area, the column prefix and the band columns (widest
    first); a `UsageError` naming what the forecast holds when there is nothing to draw."""
    products = sorted(pd.unique(forecast["product"]).tolist()) if len(forecast) else []
    if product is None:
        if len(products) != 1:
            raise UsageError(f"the forecast holds the products {products}; pick one (product=...)")
        product = products[0]
    if product not in products:
        raise UsageError(f"product was {product!r} but the forecast holds {products}")
    rows = forecast[(forecast["product"] == product) & (forecast["area_id"] == str(area_id))]
    if rows.empty:
        areas = sorted(pd.unique(forecast.loc[forecast["product"] == product, "area_id"]))
        shown = areas[:10] + (["..."] if len(areas) > 10 else [])
        raise UsageError(f"area_id was {area_id!r} but the forecast has the areas {shown}")
    prefix = "cumulative_" if cumulative else ""
    bands = _bands(rows.columns, prefix)
    if not bands:
        raise UsageError(f"the forecast has no {prefix}lower_<level>/{prefix}upper_<level> columns")

    return product, rows, prefix, bands


def _draw_forecast(ax, rows: pd.DataFrame, prefix: str, bands, offset: int) -> None:
    """The bands, palest for the widest, and the expected line, from x = ``offset`` on."""
    x = [offset + i for i in range(len(rows))]
    for i, (lower, upper) in enumerate(bands):  # widest first
        alpha = 0.25 + 0.45 * i / max(1, len(bands) - 1) if len(bands) > 1 else 0.35
        level = lower.removeprefix(prefix).removeprefix("lower_").replace("_", ".")
        ax.fill_between(
            x,
            rows[lower].to_numpy(dtype=float),
            rows[upper].to_numpy(dtype=float),
            color=_BAND,
            alpha=alpha,
            linewidth=0,
            label=f"{level} % prediction interval",
        )
    ax.plot(
        x,
        rows[f"{prefix}expected"].to_numpy(dtype=float),
        color=_LINE,
        linewidth=2.0,
        marker="o",
        markersize=3,
        label="expected",
    )


def save_fan_chart(forecast: pd.DataFrame, path: str | Path, **options: object) -> Path:
    """Draw `fan_chart` (same options) and write it as PNG to ``path`` atomically."""
    fig = fan_chart(forecast, **options)  # type: ignore[arg-type]
    return write_atomic(
        path, lambda tmp: fig.savefig(tmp, format="png", metadata={"Software": None})
    )


def _bands(columns: pd.Index, prefix: str) -> list[tuple[str, str]]:
    """(lower, upper) column pairs, widest level first."""
    pattern = re.compile(rf"^{prefix}lower_(\d+(?:_\d+)?)$")
    found = []
    for name in columns:
        match = pattern.match(name)
        if match and f"{prefix}upper_{match.group(1)}" in columns:
            found.append((float(match.group(1).replace("_", ".")), match.group(1)))
    found.sort(reverse=True)
    return [(f"{prefix}lower_{s}", f"{prefix}upper_{s}") for _, s in found]
