"""An invented company export, as a new user would bring it: "Brackwater Mutual", a water
utility in an invented district, with its own file and column names, dates as full days, Y/N
flags, its own end-reason codes, its own promotion codes and arm labels, and hand-drawn
rectangular zones as areas (GeoPackage, with a CRS). Everything is mapped in its
``lifecycle.toml``; nothing is preprocessed.

Known truth (seeded): monthly hazards of leaving (``SW`` switch, ``MV`` move, ``DC`` other),
two services taken up over time, and a retention promotion ``RET10`` sent to a random half of
two mailing lists (``T``), the other half held back (``C``).
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
from shapely.geometry import box

CRS = "EPSG:32630"  # a UTM zone in metres; the coordinates themselves are invented
FIRST, LAST = (2023, 10), (2026, 3)  # 30 months of activity
X0, Y0 = 430_000.0, 5_710_000.0
ZONES = {  # zone code: (x0, y0, x1, y1) offsets in metres, rental share, flats share
    "BRK-N": (0, 2000, 2000, 4000, 0.42, 0.30),
    "BRK-S": (0, 0, 2000, 2000, 0.18, 0.05),
    "MARL-E": (2000, 0, 4000, 2000, 0.27, 0.12),
    "MARL-W": (2000, 2000, 4000, 4000, 0.55, 0.48),
}


def _month_index(year: int, month: int) -> int:
    return year * 12 + month - 1


def _day(index: int, rng: np.random.Generator) -> str:
    year, month0 = divmod(int(index), 12)
    return f"{year:04d}-{month0 + 1:02d}-{int(rng.integers(1, 29)):02d}"


def _yes_no(values: np.ndarray, rng: np.random.Generator) -> list[str]:
    """Y/N in the mixed case a hand-kept spreadsheet has."""
    return [("Y" if v else "N") if rng.random() < 0.8 else ("y" if v else "n") for v in values]


def brackwater_frames(customers: int = 300, seed: int = 11) -> dict[str, pd.DataFrame]:
    """The export's tables, as the company names them (keys are the file stems)."""
    rng = np.random.default_rng(seed)
    first, last = _month_index(*FIRST), _month_index(*LAST)
    n = customers
    start = np.where(
        rng.random(n) < 0.7,
        rng.integers(first - 96, first, n),  # connected before the export window
        rng.integers(first, last - 2, n),
    )
    smart = rng.random(n) < 0.4
    x = X0 + rng.uniform(50, 3950, n)
    y = Y0 + rng.uniform(50, 3950, n)
    no_marketing = rng.random(n) < 0.08
    payment_plan = rng.random(n) < 0.06
    end = np.full(n, -1)
    code = np.full(n, "", dtype=object)
    promo = _promotions(rng, n)
    for i in range(n):
        for m in range(max(start[i], first - 24), last + 1):
            if m <= start[i]:
                continue
            churn = 0.02 * (0.6 if smart[i] else 1.0)
            if promo.get(i) is not None and 1 <= m - promo[i][0] <= 6 and promo[i][1] == "T":
                churn *= 0.4
            u = rng.random()
            if u < churn:
                end[i], code[i] = m, "SW"
            elif u < churn + 0.008:
                end[i], code[i] = m, "MV"
            elif u < churn + 0.010:
                end[i], code[i] = m, "DC"
            if end[i] >= 0:
                break
    accounts = pd.DataFrame(
        {
            "account_ref": [f"BW-{100000 + i}" for i in range(n)],
            "connected_on": [_day(s, rng) for s in start],
            "disconnected_on": [_day(e, rng) if e >= 0 else "" for e in end],
            "leave_code": code,
            "easting": np.round(x, 1),
            "northing": np.round(y, 1),
            "monthly_contribution": np.round(rng.gamma(4.0, 6.0, n), 2),
            "meter_type": np.where(smart, "smart", "dial"),
            "no_marketing": _yes_no(no_marketing, rng),
            "payment_plan": _yes_no(payment_plan, rng),
        }
    )
    ids = accounts["account_ref"].to_numpy()
    active_end = np.where(end >= 0, end, last)
    reads = _meter_reads(rng, ids, start, active_end, first, last)
    services = _services(rng, ids, start, active_end, first, last)
    promotions = pd.DataFrame(
        [
            {"account_ref": ids[i], "sent_on": _day(m, rng), "promo_code": "RET10", "group": g}
            for i, (m, g) in sorted(promo.items())
            if start[i] < m <= active_end[i]
        ]
    )
    return {
        "accounts": accounts,
        "meter_reads": reads,
        "services": services,
        "promotions": promotions,
    }


def _promotions(rng: np.random.Generator, n: int) -> dict[int, tuple[int, str]]:
    """Two mailings; each picked account is randomised to ``T`` (sent) or ``C`` (held back)."""
    out: dict[int, tuple[int, str]] = {}
    for month in (_month_index(2024, 9), _month_index(2025, 4)):
        for i in rng.choice(n, size=n // 3, replace=False):
            out.setdefault(int(i), (month, "T" if rng.random() < 0.5 else "C"))
    return out


def _meter_reads(rng, ids, start, active_end, first, last) -> pd.DataFrame:
    rows = []
    for i, account in enumerate(ids):
        for m in range(max(start[i], first), min(active_end[i], last) + 1):
            rows.append((account, _day(m, rng), round(rng.gamma(3.0, 3.0), 2), rng.poisson(0.1)))
    return pd.DataFrame(rows, columns=["account_ref", "reading_date", "usage_m3", "late_payments"])


def _services(rng, ids, start, active_end, first, last) -> pd.DataFrame:
    rows = []
    for service, rate in (("leak_cover", 0.02), ("smart_alerts", 0.012)):
        for i, account in enumerate(ids):
            for m in range(max(start[i] + 1, first - 12), min(active_end[i], last) + 1):
                if rng.random() < rate:
                    rows.append((account, service, _day(m, rng)))
                    break
    return pd.DataFrame(rows, columns=["account_ref", "service", "enrolled_on"])


def brackwater_zones() -> gpd.GeoDataFrame:
    """Four hand-drawn rectangles covering the district, with their CRS."""
    return gpd.GeoDataFrame(
        {
            "zone_code": list(ZONES),
            "rental_share": [z[4] for z in ZONES.values()],
            "flats_share": [z[5] for z in ZONES.values()],
        },
        geometry=[box(X0 + a, Y0 + b, X0 + c, Y0 + d) for a, b, c, d, _, _ in ZONES.values()],
        crs=CRS,
    )


SETTINGS = f"""# Brackwater Mutual's export, mapped onto lifecycle's data contract.
[data]
premise_crs = "{CRS}"

[tables]
customers = "accounts.csv"
activity = "meter_reads.csv"
uptakes = "services.csv"
campaigns = "promotions.csv"
areas = "zones.gpkg"

[columns.customers]
customer_id = "account_ref"
start_month = "connected_on"
end_month = "disconnected_on"
end_reason = "leave_code"
x = "easting"
y = "northing"
monthly_margin = "monthly_contribution"
do_not_contact = "no_marketing"
hardship = "payment_plan"

[columns.activity]
customer_id = "account_ref"
month = "reading_date"

[columns.uptakes]
customer_id = "account_ref"
product = "service"
month = "enrolled_on"

[columns.campaigns]
customer_id = "account_ref"
month = "sent_on"
offer = "promo_code"
arm = "group"

[columns.areas]
area_id = "zone_code"

[reasons]
SW = "churn"
MV = "move_out"
DC = "other"

[campaigns]
offers = {{ RET10 = "loyalty_credit" }}
arms = {{ T = "offered", C = "held_out" }}

[run]
families = ["cox"]
cutoffs = 2

[models.cox]
sample_fraction = 1.0

[[offers]]
name = "loyalty_credit"
target = "churn"
cost = 8.0
hazard_ratio = 0.8
months = 6

[[offers]]
name = "leak_cover_trial"
target = "uptake_leak_cover"
cost = 2.0
hazard_ratio = 1.5
months = 3
value_per_uptake = 150.0

[offers.eligible]
not_holding = "leak_cover"

[plan]
budget = 600.0
"""


def write_brackwater(folder: Path, customers: int = 300, seed: int = 11) -> Path:
    """The export and its ``lifecycle.toml`` in ``folder``; returns the settings file."""
    folder.mkdir(parents=True, exist_ok=True)
    for stem, frame in brackwater_frames(customers, seed).items():
        frame.to_csv(folder / f"{stem}.csv", index=False)
    brackwater_zones().to_file(folder / "zones.gpkg", driver="GPKG")
    settings = folder / "lifecycle.toml"
    settings.write_text(SETTINGS, encoding="utf-8")
    return settings
