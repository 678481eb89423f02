"""Rendering the monthly report: one self-contained HTML page and a JSON of its key figures."""

from __future__ import annotations

import json
import logging
from importlib import resources
from pathlib import Path
from typing import Any

import jinja2

from .._files import atomic_path
from ._blocks import Section, key_value
from ._inputs import ReportInputs, check_inputs
from ._sections import accuracy_section, portfolio_section, risk_map_section, tenure_section
from ._sections_action import (
    cautions_section,
    drift_section,
    drivers_section,
    forecast_section,
)
from ._sections_cohorts import cohort_section
from ._sections_plan import plan_section
from ._sections_policies import policy_section
from ._sections_track import track_section

log = logging.getLogger(__name__)

__all__ = ["REPORT_FILES", "key_figures_json", "render_report", "write_report"]

REPORT_FILES = {"html": "report.html", "key_figures": "key_figures.json"}
_TEMPLATE = "_template.html.j2"


def render_report(inputs: ReportInputs) -> tuple[str, dict[str, Any]]:
    """The report page and its key figures.

    The page is one HTML file with everything inside it: styles inline, figures as base64
    PNG ``data:`` URIs, no script, font or style sheet from elsewhere, so it opens offline and
    can be mailed as it is. Its sections, in order: the portfolio this month (against last
    month and a year before), hazard by tenure and incidence by segment, the risk map, how
    last month's predictions did with the backtest table, drivers, drift, the uptake
    forecast, the contact plan with offer rates by area, what the plan is worth against
    simpler choices, and the cautions. A section with
    nothing to show says why.

    Parameters
    ----------
    inputs
        The report's tables (`ReportInputs`); checked first.

    Returns
    -------
    html : str
        The page.
    key_figures : dict
        The headline numbers as plain JSON values (floats to 6 significant digits, NaN and
        infinities as ``None``): ``month``, ``portfolio``, ``hazard_by_tenure_band``,
        ``risk``, ``last_month``, ``champions``, ``strongest_effects``, ``drift``,
        ``forecast``, ``plan``, ``offer_rates``, ``offers`` (per offer: ``candidates``,
        ``eligible``, ``allowed``, ``positive_value``, ``chosen``, ``spend``, ``capacity``,
        ``limited_by``; see `lifecycle.decisions.offer_figures`), ``policies`` (per policy of
        ``policy_comparison.csv``: its columns; ``None`` without a comparison)
    """
    inputs = check_inputs(inputs)
    sections: list[Section] = []
    key: dict[str, Any] = {"month": inputs.month, "title": inputs.title}

    portfolio, figures = portfolio_section(inputs)
    sections.append(portfolio)
    key["portfolio"] = figures
    for build in (tenure_section, cohort_section, risk_map_section, accuracy_section,
                  drivers_section):  # fmt: skip
        section, figures = build(inputs)
        sections.append(section)
        if build is risk_map_section:
            key["risk"] = figures
        else:
            key.update(figures)
    for build in (drift_section, forecast_section, track_section, plan_section, policy_section):
        section, figures = build(inputs)
        sections.append(section)
        key.update(figures)
    key.setdefault("strongest_effects", None)
    key.setdefault("offer_rates", None)
    key.setdefault("offers", None)
    key.setdefault("policies", None)
    sections.append(cautions_section())
    empty = [s.id for s in sections if not s.blocks]
    if empty:  # every section builder adds at least a note; this guards the page's promise
        raise RuntimeError(f"report sections {empty} came out empty")

    from .. import __version__

    html = _template().render(
        title=inputs.title,
        month=inputs.month,
        notes=inputs.notes,
        sections=sections,
        version=__version__,
    )
    log.info("report for %s: %d sections, %d characters", inputs.month, len(sections), len(html))
    return html, key_value(key)


def key_figures_json(key_figures: dict[str, Any]) -> str:
    """The key figures as JSON text: sorted keys, two-space indent, a final newline."""
    return (
        json.dumps(key_figures, sort_keys=True, indent=2, ensure_ascii=False, allow_nan=False)
        + "\n"
    )


def write_report(inputs: ReportInputs, folder: str | Path) -> dict[str, Path]:
    """Render the report and write ``report.html`` and ``key_figures.json`` into ``folder``.

    Everything is rendered before anything is written, so a failure leaves ``folder`` as it
    was. Each file is written to a temporary file beside it and renamed into place
    (`lifecycle._files.atomic_path`), the two renames back to back, so no partial file is
    ever visible. The same inputs give the same bytes. Existing files of these names are
    replaced: whether an earlier month may be rewritten is the caller's decision.

    Returns
    -------
    dict
        ``{"html": path, "key_figures": path}``.
    """
    html, key_figures = render_report(inputs)
    text = key_figures_json(key_figures)
    folder = Path(folder)
    paths = {name: folder / file for name, file in REPORT_FILES.items()}
    with atomic_path(paths["key_figures"]) as json_tmp, atomic_path(paths["html"]) as html_tmp:
        json_tmp.write_text(text, encoding="utf-8", newline="\n")
        html_tmp.write_text(html, encoding="utf-8", newline="\n")
    log.info("report written to %s", folder)
    return paths


def _template() -> jinja2.Template:
    source = resources.files(__package__).joinpath(_TEMPLATE).read_text(encoding="utf-8")
    env = jinja2.Environment(
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
    )
    return env.from_string(source)
