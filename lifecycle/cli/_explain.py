"""``lifecycle explain``: one customer's scores, values and reasons (over `explain_customer`)."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

from .._months import parse_month
from ._commands import Command, _data_arguments, _load

#: Months of hazards shown in the terminal table (the JSON holds the whole value horizon).
SHOWN_MONTHS = 12


def _arguments(p: argparse.ArgumentParser) -> None:
    _data_arguments(p)
    p.add_argument("--model", required=True, type=Path, help="folder of a saved model")
    p.add_argument("--as-of", required=True, help="score the customer at the end of this month")
    p.add_argument("--customer", required=True, help="the customer's id")
    p.add_argument("--history", type=Path, help="score history (default: the [run] one)")
    p.add_argument("--json", action="store_true", help="print one JSON object instead")


def _run(args: argparse.Namespace) -> None:
    from ..cycle import explain_customer
    from ..models import load_model

    parse_month(args.as_of, what="--as-of")
    tables, config = _load(args)
    model = load_model(args.model)
    found = explain_customer(tables, model, args.as_of, args.customer, config, history=args.history)
    if args.json:
        print(json.dumps(found, indent=2, ensure_ascii=False, allow_nan=False))
    else:
        show(found)


def show(found: dict[str, Any]) -> None:
    """The explanation as rich tables on the terminal (plain text when piped)."""
    from rich.console import Console
    from rich.table import Table

    console = Console(file=sys.stdout)
    unit = f" ({found['currency']})" if found.get("currency") else ""
    console.print(
        f"[bold]Customer {found['customer_id']}[/bold] as of {found['as_of']} "
        f"(predictions from {found['first_month']}); lifetime value "
        f"{found['lifetime_value']:,.2f}{unit}"
    )
    features = Table(title="Features as of the end of the month", show_lines=False)
    features.add_column("feature")
    features.add_column("value", justify="right")
    for name, value in found["features"].items():
        features.add_row(name, _text(value))
    console.print(features)

    causes = list(found["hazards"])
    months = found["months"][:SHOWN_MONTHS]
    hazard = Table(title="Monthly hazard of each cause (given still a customer)")
    curves = Table(title="Survival and cumulative incidence by the end of each month")
    hazard.add_column("month", justify="right")
    curves.add_column("month", justify="right")
    curves.add_column("survival", justify="right")
    for cause in causes:
        hazard.add_column(cause, justify="right")
        curves.add_column(cause, justify="right")
    for t, _ in enumerate(months):
        hazard.add_row(str(t + 1), *[f"{found['hazards'][c][t]:.4f}" for c in causes])
        curves.add_row(
            str(t + 1),
            f"{found['survival'][t]:.4f}",
            *[f"{found['incidence'][c][t]:.4f}" for c in causes],
        )
    console.print(hazard)
    console.print(curves)

    for o in found["offers"]:
        offer = Table(title=f"Offer {o['offer']} ({o['target']})", show_header=False)
        offer.add_column("what")
        offer.add_column("value")
        offer.add_row(f"expected value{unit}", f"{o['expected_value']:,.2f}")
        offer.add_row("  = value saved", f"{o['value_saved']:,.2f}")
        offer.add_row("  + uptake value", f"{o['uptake_value']:,.2f}")
        offer.add_row("  − cost", f"{o['cost']:,.2f}")
        source = "own, from its campaign" if o.get("own_effect") else "the offer's"
        offer.add_row("hazard ratio", f"{o['hazard_ratio']:.3f} ({source})")
        offer.add_row(f"effect on {o['target']} risk", f"{o['effect']:+.4f}")
        offer.add_row("may receive it", "yes" if o["eligible"] else "no")
        for words in o["exclusions"]:
            offer.add_row("  not allowed:", words)
        for rank, words in enumerate(o["reasons"], start=1):
            offer.add_row(f"reason {rank}", words)
        console.print(offer)

    if found["history"]:
        past = Table(title="Past months (score history)")
        wanted = ("cif_churn_3m", "cif_churn_12m", "lifetime_value")
        shown = [k for k in wanted if k in found["history"][0]]
        for name in ("month", *shown, "planned offer"):
            past.add_column(name)
        for entry in found["history"]:
            past.add_row(
                entry["month"],
                *[_text(entry.get(k)) for k in shown],
                entry["planned_offer"] or "-",
            )
        console.print(past)
    else:
        console.print("No past months: the score history holds none for this customer.")


def _text(value: Any) -> str:
    if value is None:
        return "-"
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)


EXPLAIN = Command(
    "explain",
    "one customer: features, hazards, survival, values and offers with their reasons",
    _arguments,
    _run,
)
