"""A second invented company export: the "Fernholm Heat Co-operative", a district-heating
co-operative in the invented town of Fernholm. Everything here is invented known-truth data
(seeded); no real company, place or person.

It differs from Brackwater (tests/_brackwater.py) wherever a real export could:
- member numbers that look numeric with leading zeros (``"000123"``), kept in a Parquet file
  as text, and in the CSV files as the same text;
- the members table in Parquet, with its end-reason codes as whole numbers (nullable) and
  dates as ``dd.mm.yyyy`` text (a format named in ``[formats]``);
- premises as lon/lat degrees (WGS 84), areas as a GeoJSON file of hand-drawn irregular
  polygons named by text (with spaces), one with a hole (a park), a few premises in the hole
  and a few just outside the district (taken into the nearest area within 400 m);
- monthly heat readings with billing periods written ``yyyymm`` and some months missing for
  some members (failed meter reads);
- flags as 1/0 text (no contact), Parquet booleans (payment arrangement) and ``true``/``false``
  text (marketing consent, through ``[plan] consent_column``);
- a common add-on (``service_plan``) and one taken up by only a few members (``smart_valve``);
- a winter mailing ``VINTER24`` sent to a random part of one list (``brev``), the rest held back
  (``kontroll``): the co-operative's own codes;
- the same tables also as one DuckDB database (`write_fernholm_duckdb`), districts as WKT.

Known truth: churn (code 11: switched to an own heat pump) 1.2 % a month, halved for members on
the ``fixed`` tariff and lowered by a third for six months after the mailing; move-out (code 21:
sold the house) 0.5 % a month, doubled in flats; other exits (code 31) 0.15 %.
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
from shapely.geometry import Polygon

DISTANCE_CRS = "EPSG:32633"  # where the district is drawn, in metres; the place is invented
X0, Y0 = 500_000.0, 6_760_000.0
FIRST, LAST = (2023, 7), (2026, 5)  # 35 months of readings
HOLE = ((2000, 2000), (2500, 2000), (2500, 2500), (2000, 2500))  # the park in "Kvarn Hill"
DISTRICTS = {  # name: (outline in metres from (X0, Y0), rental share, flats share)
    "Old Harbour": (((0, 0), (1600, 0), (1500, 800), (1400, 1650), (700, 1600), (0, 1700)),
                    0.46, 0.52),
    "Brick Lanes": (((1600, 0), (3000, 0), (3000, 1400), (2200, 1500), (1400, 1650),
                     (1500, 800)), 0.21, 0.10),
    "Kvarn Hill": (((1400, 1650), (2200, 1500), (3000, 1400), (3000, 3000), (1300, 3000),
                    (1450, 2300)), 0.12, 0.04),
    "Ash Meadow": (((0, 1700), (700, 1600), (1400, 1650), (1450, 2300), (1300, 3000),
                    (0, 3000)), 0.33, 0.25),
}  # fmt: skip
SMART_VALVE_TAKERS = 9  # the add-on taken up by only a few members


def _month_index(year: int, month: int) -> int:
    return year * 12 + month - 1


def _date(index: int, rng: np.random.Generator) -> str:
    """A day of the month as the co-operative writes it: dd.mm.yyyy."""
    year, month0 = divmod(int(index), 12)
    return f"{int(rng.integers(1, 29)):02d}.{month0 + 1:02d}.{year:04d}"


def _premises(rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Metres from (X0, Y0): most inside the district; 3 in the park, 4 just east of it."""
    x, y = rng.uniform(40, 2960, n), rng.uniform(40, 2960, n)
    in_park = (x > 2000) & (x < 2500) & (y > 2000) & (y < 2500)
    x[in_park] -= 600  # nobody lives in the park, except the few placed there below
    x[:3], y[:3] = rng.uniform(2100, 2400, 3), rng.uniform(2100, 2400, 3)
    x[3:7], y[3:7] = rng.uniform(3050, 3250, 4), rng.uniform(200, 2800, 4)
    return x, y


def fernholm_frames(members: int = 360, seed: int = 5) -> dict[str, pd.DataFrame]:
    """The export's tables, as the co-operative names them (keys are the file stems)."""
    rng = np.random.default_rng(seed)
    first, last = _month_index(*FIRST), _month_index(*LAST)
    n = members
    start = np.where(
        rng.random(n) < 0.75,
        rng.integers(first - 120, first, n),  # connected before the readings begin
        rng.integers(first, last - 2, n),
    )
    x, y = _premises(rng, n)
    building = rng.choice(["house", "flat", "terrace"], n, p=[0.5, 0.3, 0.2])
    tariff = np.where(rng.random(n) < 0.35, "fixed", "variable")
    mailing = _mailing(rng, n, start)
    end, code = _exits(rng, start, building, tariff, mailing, first, last)
    points = gpd.GeoSeries(gpd.points_from_xy(X0 + x, Y0 + y), crs=DISTANCE_CRS).to_crs(4326)
    lon, lat = points.x.to_numpy(), points.y.to_numpy()
    floor = np.round(rng.normal(95, 30, n).clip(30, 300))
    floor_text = np.where(rng.random(n) < 0.05, np.nan, floor)  # some never measured
    table = pd.DataFrame(
        {
            "member_no": [f"{i + 1:06d}" for i in range(n)],
            "joined": [_date(s, rng) for s in start],
            "left_on": [_date(e, rng) if e >= 0 else None for e in end],
            "leave_code": pd.array([c if c > 0 else None for c in code], dtype="Int64"),
            "longitude": np.round(lon, 6),
            "latitude": np.round(lat, 6),
            "monthly_surplus": np.round(rng.gamma(5.0, 7.0, n), 2),
            "building": building,
            "tariff": tariff,
            "floor_area_m2": floor_text,
            "no_contact": (rng.random(n) < 0.07).astype(int).astype(str),
            "payment_arrangement": rng.random(n) < 0.05,  # Parquet keeps it boolean
            "marketing_ok": np.where(rng.random(n) < 0.85, "true", "false"),
        }
    )
    ids = table["member_no"].to_numpy()
    active_end = np.where(end >= 0, end, last)
    return {
        "members": table,
        "heat_readings": _readings(rng, ids, start, active_end, first, last),
        "add_ons": _add_ons(rng, ids, start, active_end, first, last),
        "mailings": pd.DataFrame(
            [
                {"member_no": ids[i], "posted": _date(m, rng), "campaign": "VINTER24", "list": g}
                for i, (m, g) in sorted(mailing.items())
            ]
        ),
    }


def _mailing(rng, n: int, start: np.ndarray) -> dict[int, tuple[int, str]]:
    """One winter mailing: 70 % of the members who had joined by then, randomised 60/40."""
    month = _month_index(2024, 11)
    chosen = [int(i) for i in rng.choice(n, size=int(0.7 * n), replace=False) if start[i] < month]
    return {i: (month, "brev" if rng.random() < 0.6 else "kontroll") for i in chosen}


def _exits(rng, start, building, tariff, mailing, first, last):
    n = len(start)
    end, code = np.full(n, -1), np.zeros(n, dtype=int)
    for i in range(n):
        for m in range(max(start[i] + 1, first - 24), last + 1):
            churn = 0.012 * (0.5 if tariff[i] == "fixed" else 1.0)
            sent = mailing.get(i)
            if sent is not None and sent[1] == "brev" and 1 <= m - sent[0] <= 6:
                churn *= 2 / 3
            move = 0.005 * (2.0 if building[i] == "flat" else 1.0)
            u = rng.random()
            for limit, reason in ((churn, 11), (churn + move, 21), (churn + move + 0.0015, 31)):
                if u < limit:
                    end[i], code[i] = m, reason
                    break
            if end[i] >= 0:
                break
    # A member who left before the mailing month was never on its list.
    for i in [i for i, (m, _) in mailing.items() if 0 <= end[i] <= m]:
        del mailing[i]
    return end, code


def _readings(rng, ids, start, active_end, first, last) -> pd.DataFrame:
    """Monthly heat in MWh; a fifth of the members miss about a quarter of their months."""
    gaps = rng.random(len(ids)) < 0.2
    rows = []
    for i, member in enumerate(ids):
        for m in range(max(start[i], first), min(active_end[i], last) + 1):
            if gaps[i] and rng.random() < 0.25:
                continue
            year, month0 = divmod(m, 12)
            winter = 1.0 + 0.8 * np.cos(2 * np.pi * month0 / 12)
            heat = round(float(rng.gamma(4.0, 0.3) * winter), 3)
            rows.append((member, f"{year:04d}{month0 + 1:02d}", heat, int(rng.poisson(0.05))))
    return pd.DataFrame(rows, columns=["member_no", "period", "heat_mwh", "reminders"])


def _add_ons(rng, ids, start, active_end, first, last) -> pd.DataFrame:
    rows = []
    for i, member in enumerate(ids):
        for m in range(max(start[i] + 1, first - 12), min(active_end[i], last) + 1):
            if rng.random() < 0.015:
                rows.append((member, "service_plan", _date(m, rng)))
                break
    takers = rng.choice(np.flatnonzero(active_end >= first + 6), SMART_VALVE_TAKERS, replace=False)
    for i in sorted(takers):
        m = int(rng.integers(max(start[i] + 1, first), active_end[i] + 1))
        rows.append((ids[i], "smart_valve", _date(m, rng)))
    return pd.DataFrame(rows, columns=["member_no", "add_on", "since"])


def fernholm_districts() -> gpd.GeoDataFrame:
    """The four hand-drawn districts in lon/lat (as GeoJSON keeps them); Kvarn Hill has a hole."""
    shapes = []
    for name, (outline, _, _) in DISTRICTS.items():
        holes = [[(X0 + a, Y0 + b) for a, b in HOLE]] if name == "Kvarn Hill" else []
        shapes.append(Polygon([(X0 + a, Y0 + b) for a, b in outline], holes))
    return gpd.GeoDataFrame(
        {
            "district": list(DISTRICTS),
            "rental_share": [d[1] for d in DISTRICTS.values()],
            "flats_share": [d[2] for d in DISTRICTS.values()],
        },
        geometry=shapes,
        crs=DISTANCE_CRS,
    ).to_crs("EPSG:4326")


SETTINGS = """# The Fernholm Heat Co-operative's export, mapped onto lifecycle's data contract.
[tables]
customers = "members.parquet"
activity = "heat_readings.csv"
uptakes = "add_ons.csv"
campaigns = "mailings.csv"
areas = "districts.geojson"

[columns.customers]
customer_id = "member_no"
start_month = "joined"
end_month = "left_on"
end_reason = "leave_code"
lon = "longitude"
lat = "latitude"
monthly_margin = "monthly_surplus"
do_not_contact = "no_contact"
hardship = "payment_arrangement"

[columns.activity]
customer_id = "member_no"
month = "period"

[columns.uptakes]
customer_id = "member_no"
product = "add_on"
month = "since"

[columns.campaigns]
customer_id = "member_no"
month = "posted"
offer = "campaign"
arm = "list"

[columns.areas]
area_id = "district"

[formats]
customers = "%d.%m.%Y"
activity = "%Y%m"
uptakes = "%d.%m.%Y"
campaigns = "%d.%m.%Y"

[reasons]
11 = "churn"
21 = "move_out"
31 = "other"

[campaigns]
offers = { VINTER24 = "winter_letter" }
arms = { brev = "offered", kontroll = "held_out" }

[spatial]
nearest_area_max_m = 400
radii_m = [300]

[models]
min_events = 0

[models.cox]
sample_fraction = 1.0
penalizer = 0.01

[run]
families = ["cox"]
cutoffs = 2

[value]
currency = "SEK"

[[offers]]
name = "winter_letter"
target = "churn"
cost = 25.0
hazard_ratio = 0.8
months = 6

[[offers]]
name = "service_plan_call"
target = "uptake_service_plan"
cost = 15.0
hazard_ratio = 1.6
months = 3
value_per_uptake = 900.0
weekly_capacity = 5

[offers.eligible]
not_holding = "service_plan"

[plan]
budget = 900.0
consent_column = "marketing_ok"
"""


def write_fernholm(folder: Path, members: int = 360, seed: int = 5) -> Path:
    """The export and its ``lifecycle.toml`` in ``folder``; returns the settings file."""
    folder.mkdir(parents=True, exist_ok=True)
    frames = fernholm_frames(members, seed)
    frames.pop("members").to_parquet(folder / "members.parquet", index=False)
    for stem, frame in frames.items():
        frame.to_csv(folder / f"{stem}.csv", index=False)
    fernholm_districts().to_file(folder / "districts.geojson", driver="GeoJSON")
    settings = folder / "lifecycle.toml"
    settings.write_text(SETTINGS, encoding="utf-8")
    return settings


def write_fernholm_duckdb(folder: Path, members: int = 360, seed: int = 5) -> Path:
    """The same export as one DuckDB database (the districts as WKT text in lon/lat, named in
    ``[data] areas_crs``) beside its ``lifecycle.toml``; returns the settings file."""
    import duckdb

    folder.mkdir(parents=True, exist_ok=True)
    frames = fernholm_frames(members, seed)
    districts = fernholm_districts()
    frames["districts"] = pd.DataFrame(districts.drop(columns="geometry")).assign(
        geometry=districts.geometry.to_wkt()
    )
    with duckdb.connect(str(folder / "fernholm.duckdb")) as con:
        for name, frame in frames.items():
            con.register("frame", frame)
            con.execute(f'CREATE TABLE "{name}" AS SELECT * FROM frame')
            con.unregister("frame")
    settings = SETTINGS.replace("[tables]", '[data]\nareas_crs = "EPSG:4326"\n\n[tables]')
    for stem in ("members.parquet", "heat_readings.csv", "add_ons.csv", "mailings.csv"):
        settings = settings.replace(f'"{stem}"', f'"{stem.split(".")[0]}"')
    settings = settings.replace('"districts.geojson"', '"districts"')
    path = folder / "lifecycle.toml"
    path.write_text(settings, encoding="utf-8")
    return path
