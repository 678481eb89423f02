"""The second invented company export (tests/_fernholm.py, a district-heating co-operative)
taken through `lifecycle check`, `lifecycle run` and `lifecycle explain` as a new user would:
member numbers with leading zeros, a Parquet members table with whole-number reason codes,
dates as dd.mm.yyyy and yyyymm, lon/lat premises, hand-drawn GeoJSON districts with a hole,
flags as text 1/0, booleans and true/false, a consent column, a rare add-on, a mailing with its
own codes, all mapped in settings. The cycle runs once per folder (two folders, for the bytes);
every test reads its outputs as their users would.
"""

from __future__ import annotations

import base64
import contextlib
import io
import json
import re
import shutil
from html import unescape
from html.parser import HTMLParser
from pathlib import Path

import duckdb
import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from shapely.geometry import Point

from lifecycle.cli import main
from tests._fernholm import (
    DISTANCE_CRS,
    DISTRICTS,
    X0,
    Y0,
    fernholm_districts,
    write_fernholm,
    write_fernholm_duckdb,
)

MONTH = "2026-05"  # the export's last month of readings (known truth of the generator)


def _quiet(argv: list[str]) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def fernholm(tmp_path_factory):
    root = tmp_path_factory.mktemp("fernholm")
    runs = {}
    for name in ("a", "b"):  # the same seed in two folders: same bytes
        settings = write_fernholm(root / name / "data")
        code, out, err = _quiet(["run", "--config", str(settings)])
        assert code == 0, err
        runs[name] = settings.parent
    settings = write_fernholm_duckdb(root / "db")  # the same export as a DuckDB database
    database = settings.parent / "fernholm.duckdb"
    code, out, err = _quiet(["run", "--config", str(settings), "--data", str(database)])
    assert code == 0, err
    runs["db"] = settings.parent
    data = runs["a"]
    code, checked, err = _quiet(["check", str(data)])
    assert code == 0, err
    members = pd.read_parquet(data / "members.parquet")
    folder = data / "reports" / MONTH
    plan = pd.read_csv(folder / "contact_plan.csv", dtype={"customer_id": str})
    model = next((data / ".lifecycle-work" / "models").iterdir())
    explained = {}
    for offer, rows in plan.groupby("offer"):
        member = rows["customer_id"].iloc[0]
        argv = ["explain", str(data), "--model", str(model), "--as-of", MONTH, "--json"]
        code, out, err = _quiet([*argv, "--customer", member])
        assert code == 0, err
        explained[offer] = (rows.iloc[0], json.loads(out))
    return {
        "data": data,
        "other": runs["b"],
        "duckdb": runs["db"],
        "folder": folder,
        "checked": checked,
        "members": members,
        "plan": plan,
        "model": model,
        "explained": explained,
    }


def _active(members: pd.DataFrame) -> pd.DataFrame:
    """Members still connected at the end of the extract month (no leaving date)."""
    return members[members["left_on"].isna()]


def test_check_reads_the_export_as_its_settings_map_it(fernholm):
    out, members = fernholm["checked"], fernholm["members"]
    codes = members["leave_code"].value_counts()
    assert f"extract month: {MONTH}" in out and "customers: 360" in out
    # the whole-number reason codes of the Parquet file, mapped in [reasons]
    assert f"exits: churn {codes[11]}, move_out {codes[21]}, other {codes[31]}" in out
    assert "areas: 4 polygons in EPSG:4326; attributes rental_share, flats_share" in out
    assert "premise coordinates: EPSG:4326" in out
    assert "smart_valve 9" in out  # the rare add-on: nine takers, known truth
    assert "campaigns: winter_letter/held_out" in out  # VINTER24 / kontroll mapped


def test_premises_outside_every_district_take_the_nearest_one(fernholm):
    """Three premises sit in Kvarn Hill's park (its hole) and four just east of the district;
    within 400 m each takes the district nearest to it, as shapely measures in metres."""
    from lifecycle.config import load_config
    from lifecycle.data import load_tables
    from lifecycle.spatial import premise_areas

    data = fernholm["data"]
    tables = load_tables(data, load_config(data / "lifecycle.toml"))
    areas = premise_areas(tables, load_config(data / "lifecycle.toml"))
    metric = fernholm_districts().to_crs(DISTANCE_CRS)
    members = fernholm["members"]
    points = gpd.GeoSeries.from_xy(members["longitude"], members["latitude"], crs=4326).to_crs(
        DISTANCE_CRS
    )
    for i in range(7):
        point = Point(points.iloc[i].x, points.iloc[i].y)
        assert not metric.geometry.covers(point).any(), i  # outside every district
        nearest = metric["district"].iloc[int(np.argmin(metric.geometry.distance(point)))]
        assert areas.loc[members["member_no"].iloc[i]] == nearest
    assert set(areas.iloc[:3]) == {"Kvarn Hill"}  # the park is Kvarn Hill's hole
    assert areas.notna().all() and set(areas) == set(DISTRICTS)
    assert abs(points.iloc[0].x - X0 - 2250) < 200 and abs(points.iloc[0].y - Y0 - 2250) < 200


def test_every_planned_contact_is_active_consenting_unflagged_and_eligible(fernholm):
    plan, members = fernholm["plan"], fernholm["members"].set_index("member_no")
    assert set(plan["offer"]) == {"winter_letter", "service_plan_call"}
    for row in plan.itertuples():
        member = members.loc[row.customer_id]
        assert pd.isna(member["left_on"]), row.customer_id
        assert member["no_contact"] == "0" and not member["payment_arrangement"], row
        assert member["marketing_ok"] == "true", row
    add_ons = pd.read_csv(fernholm["data"] / "add_ons.csv", dtype=str)
    since = pd.to_datetime(add_ons["since"], format="%d.%m.%Y").dt.strftime("%Y-%m")
    held = (add_ons["add_on"] == "service_plan") & (since <= MONTH)
    holders = set(add_ons.loc[held, "member_no"])
    calls = plan.loc[plan["offer"] == "service_plan_call", "customer_id"]
    assert len(calls) and not set(calls) & holders
    weekly = plan[plan["offer"] == "service_plan_call"].groupby("week").size()
    assert weekly.max() <= 5  # weekly_capacity
    assert plan["cost"].sum() <= 900.0


def test_reasons_are_given_and_name_no_district_attribute(fernholm):
    plan = fernholm["plan"]
    area_words = ["rental", "flats_share", "flats share", "move rate", "local_move", *DISTRICTS]
    for row in plan.itertuples():
        assert isinstance(row.reasons, str) and row.reasons.strip(), row
        low = row.reasons.lower()
        assert not [w for w in area_words if w.lower() in low], row.reasons


def test_amounts_are_in_cents_and_the_currency_is_named(fernholm):
    folder = fernholm["folder"]
    text = pd.read_csv(folder / "contact_plan.csv", dtype=str)
    scores = pd.read_csv(folder / "scores.csv", dtype=str)
    cents = re.compile(r"^-?\d+(\.\d{1,2})?$")
    for column, values in (
        ("expected_value", text["expected_value"]),
        ("cost", text["cost"]),
        ("lifetime_value", scores["lifetime_value"]),
    ):
        assert values.str.match(cents).all(), (column, values[~values.str.match(cents)].head())
    key = json.loads((folder / "key_figures.json").read_text())
    assert key["plan"]["currency"] == "SEK"
    assert "SEK" in (folder / "report.html").read_text(encoding="utf-8")


def test_the_summary_says_who_was_left_out_and_why(fernholm):
    folder, members = fernholm["folder"], fernholm["members"]
    summary = json.loads((folder / "run_summary.json").read_text())["plan"]
    active = _active(members)
    flagged = {
        "do_not_contact": active["no_contact"] == "1",
        "hardship": active["payment_arrangement"],
        "not opted in (marketing_ok)": active["marketing_ok"] != "true",
    }
    assert summary["excluded_by"] == {k: int(v.sum()) for k, v in flagged.items()}
    union = flagged["do_not_contact"] | flagged["hardship"] | flagged["not opted in (marketing_ok)"]
    assert summary["excluded_customers"] == int(union.sum())
    # the mailing's six churn events are too few to learn an effect per customer: said so
    letter = summary["effects"]["winter_letter"]
    assert letter["from"] == "campaigns" and letter["per_customer"] is False
    assert letter["reason"].startswith("too few target events")
    # known truth of the generator: the letter lowers churn by a third for six months; the
    # campaign's 95 % interval holds it, though its point estimate is far below it (six events)
    assert letter["lower_95"] < 2 / 3 < letter["upper_95"]
    html = unescape((folder / "report.html").read_text(encoding="utf-8"))
    assert f"Left out before planning: {int(union.sum())} customers" in html


def test_member_numbers_keep_their_leading_zeros_in_every_output(fernholm):
    folder, members = fernholm["folder"], fernholm["members"]
    active = set(_active(members)["member_no"])
    scores = pd.read_csv(folder / "scores.csv", dtype=str)
    assert set(scores["customer_id"]) == active  # every active member scored, ids as given
    assert set(fernholm["plan"]["customer_id"]) <= active
    with duckdb.connect(str(folder.parent / "history.duckdb"), read_only=True) as con:
        tables = [r[0] for r in con.execute("SHOW TABLES").fetchall()]
        for table in tables:
            columns = [r[0] for r in con.execute(f'DESCRIBE "{table}"').fetchall()]
            if "customer_id" in columns:
                ids = {r[0] for r in con.execute(f'SELECT customer_id FROM "{table}"').fetchall()}
                assert ids and ids <= active, table
    for _, (row, found) in fernholm["explained"].items():
        assert found["customer_id"] == row["customer_id"] and found["customer_id"][0] == "0"


def test_explain_agrees_with_the_plan_and_refuses_an_id_without_its_zeros(fernholm):
    for offer, (row, found) in fernholm["explained"].items():
        offers = {o["offer"]: o for o in found["offers"]}
        chosen = offers[offer]
        assert chosen["eligible"] and chosen["exclusions"] == []
        assert chosen["expected_value"] == pytest.approx(row["expected_value"], abs=0.006)
        assert "; ".join(chosen["reasons"]) == row["reasons"]
    member = next(iter(fernholm["explained"].values()))[0]["customer_id"]
    argv = ["explain", str(fernholm["data"]), "--model", str(fernholm["model"]), "--as-of", MONTH]
    code, _, err = _quiet([*argv, "--customer", member.lstrip("0")])
    assert code == 2 and f"'{member.lstrip('0')}' is not in the customers table" in err


class _Images(HTMLParser):
    def __init__(self):
        super().__init__()
        self.images: list[str] = []

    def handle_starttag(self, tag, attrs):
        if tag == "img":
            self.images.append(dict(attrs).get("src", ""))


def test_the_report_renders_with_the_districts_by_name(fernholm):
    html = (fernholm["folder"] / "report.html").read_text(encoding="utf-8")
    page = _Images()
    page.feed(html)
    assert len(page.images) >= 10
    for src in page.images:
        assert src.startswith("data:image/png;base64,")
        assert base64.b64decode(src.split(",", 1)[1], validate=True)[:4] == b"\x89PNG"
    for name in DISTRICTS:
        assert name in html  # offer rates by area, by the districts' own names
    text = unescape(html)
    assert "winter_letter: the campaign's average effect (too few target events" in text


def test_the_same_export_gives_the_same_bytes(fernholm):
    """Two runs of the same seeded export in different folders, by different processes at
    different times: every file of the month is byte for byte the same (the run summary's
    data fingerprint included: the reports folder inside the data folder is not an input)."""
    one, two = fernholm["folder"], fernholm["other"] / "reports" / MONTH
    names = sorted(p.name for p in one.iterdir())
    assert names == sorted(p.name for p in two.iterdir()) and "run_summary.json" in names
    for name in names:
        assert (one / name).read_bytes() == (two / name).read_bytes(), name


def test_the_export_as_a_duckdb_database_gives_the_same_plan_and_scores(fernholm):
    """The same tables kept in DuckDB (member numbers as VARCHAR, reason codes as BIGINT with
    NULLs, districts as WKT text) and run with --data: the same bytes in every table the run
    writes; only the maps may differ (WKT keeps the outlines at another precision)."""
    one, two = fernholm["folder"], fernholm["duckdb"] / "reports" / MONTH
    for name in ("contact_plan.csv", "scores.csv", "uptake_forecast.csv", "key_figures.json"):
        assert (one / name).read_bytes() == (two / name).read_bytes(), name


def _copy_with_members(fernholm, folder: Path, edit) -> Path:
    """The export without its outputs, its members table changed by ``edit``."""
    shutil.copytree(fernholm["data"], folder, ignore=shutil.ignore_patterns("reports", ".*"))
    members = pd.read_parquet(folder / "members.parquet")
    edit(members)
    members.to_parquet(folder / "members.parquet", index=False)
    return folder


def _refused(folder: Path, capsys, commands=("check", "run")) -> str:
    """Each command exits 2 with one line and writes nothing; returns the line."""
    line = ""
    for command in commands:
        before = sorted(str(p) for p in folder.rglob("*"))
        argv = ["check", str(folder)]
        argv = argv if command == "check" else ["run", "--config", str(folder / "lifecycle.toml")]
        assert main(argv) == 2, command
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1, err
        line = err[0]
        assert sorted(str(p) for p in folder.rglob("*")) == before, command
    return line


def test_a_flag_written_j_n_needs_its_words_in_the_settings(fernholm, tmp_path, capsys):
    """A flag written J/N (Ja/Nej) is refused by name, pointing to [data] flag_words; with
    { J = "1", N = "0" } there, the run reads it, and no J member is planned."""

    def j_n(members):
        members["payment_arrangement"] = np.where(members["payment_arrangement"], "J", "N")

    data = _copy_with_members(fernholm, tmp_path / "data", j_n)
    members = pd.read_parquet(data / "members.parquet")
    flagged = members.query("payment_arrangement == 'J'")
    line = _refused(data, capsys)
    assert "'payment_arrangement' (hardship)" in line and "['J']" in line
    assert f"({len(flagged)} rows, e.g. {flagged['member_no'].iloc[0]}" in line
    assert "[data] flag_words" in line
    settings = data / "lifecycle.toml"
    text = settings.read_text(encoding="utf-8")
    settings.write_text('[data]\nflag_words = { j = "1", N = "0" }\n\n' + text, encoding="utf-8")
    code, _, err = _quiet(["run", "--config", str(settings)])
    assert code == 0, err
    folder = data / "reports" / MONTH
    plan = pd.read_csv(folder / "contact_plan.csv", dtype={"customer_id": str})
    assert len(plan) and not set(plan["customer_id"]) & set(flagged["member_no"])
    summary = json.loads((folder / "run_summary.json").read_text())["plan"]
    active = _active(members)
    assert summary["excluded_by"]["hardship"] == int((active["payment_arrangement"] == "J").sum())
    assert (folder / "contact_plan.csv").read_bytes() == (
        fernholm["folder"] / "contact_plan.csv"
    ).read_bytes()  # the same plan as with the flags written as booleans


def test_consent_written_j_n_is_refused_before_any_work(fernholm, tmp_path, capsys):
    """Consent written J/N was read as text: `check` passed it and `run` refused it only at
    the plan, after the backtest and the fit. Now both refuse it from the table, by name."""

    def j_n(members):
        members["marketing_ok"] = np.where(members["marketing_ok"] == "true", "J", "N")

    data = _copy_with_members(fernholm, tmp_path / "data", j_n)
    consenting = pd.read_parquet(data / "members.parquet").query("marketing_ok == 'J'")
    line = _refused(data, capsys)
    assert "'marketing_ok'" in line and "[plan] consent_column" in line and "['J']" in line
    assert f"({len(consenting)} rows, e.g. {consenting['member_no'].iloc[0]}" in line


def test_reason_codes_stored_as_floats_are_read_as_their_whole_numbers(fernholm, tmp_path):
    """A whole-number column with blanks, as pandas writes it without a nullable type, holds
    11.0, 21.0, 31.0: read as the codes 11, 21, 31 of [reasons] (they were refused as
    unknown codes '11.0', ...)."""

    def floats(members):
        members["leave_code"] = members["leave_code"].astype("float64")

    data = _copy_with_members(fernholm, tmp_path / "data", floats)
    code, out, err = _quiet(["check", str(data)])
    assert code == 0, err
    exits = next(line for line in out.splitlines() if line.startswith("exits:"))
    assert exits in fernholm["checked"]  # the same counts as the whole-number codes


def test_leavers_without_a_reason_need_the_settings_to_name_it(fernholm, tmp_path, capsys):
    """Three leavers exported with a blank reason: refused by name, pointing to [data]
    blank_end_reason; with "other" there, they count as other exits."""
    left = fernholm["members"].index[fernholm["members"]["left_on"].notna()][:3]

    def blanks(members):
        members.loc[left, "leave_code"] = pd.NA

    data = _copy_with_members(fernholm, tmp_path / "data", blanks)
    ids = fernholm["members"].loc[left, "member_no"].tolist()
    line = _refused(data, capsys, commands=("check",))
    assert "is blank but end_month is given (3 rows, e.g. " + ", ".join(ids) in line
    assert "[data] blank_end_reason" in line
    settings = data / "lifecycle.toml"
    text = settings.read_text(encoding="utf-8")
    settings.write_text('[data]\nblank_end_reason = "other"\n\n' + text, encoding="utf-8")
    code, out, err = _quiet(["check", str(data)])
    assert code == 0, err
    codes = fernholm["members"]["leave_code"].drop(index=left).value_counts()
    assert f"exits: churn {codes[11]}, move_out {codes[21]}, other {codes[31] + 3}" in out


def test_an_extra_exclusion_column_may_hold_numbers_but_no_other_word(fernholm, tmp_path, capsys):
    """[plan] exclude columns are read as set when not 0 (a count of open complaints works);
    a word that is neither a flag word nor a number is refused by name, before any work."""

    def complaints(members):
        members["open_complaints"] = np.arange(len(members)) % 4  # 0..3

    data = _copy_with_members(fernholm, tmp_path / "data", complaints)
    settings = data / "lifecycle.toml"
    text = settings.read_text(encoding="utf-8")
    settings.write_text(text + 'exclude = ["open_complaints"]\n', encoding="utf-8")
    assert text.rstrip().endswith('consent_column = "marketing_ok"')  # [plan] is the last table
    code, _, err = _quiet(["check", str(data)])
    assert code == 0, err
    members = pd.read_parquet(data / "members.parquet")
    members["open_complaints"] = np.where(members["open_complaints"] > 0, "open", "")
    members.to_parquet(data / "members.parquet", index=False)
    line = _refused(data, capsys, commands=("check",))
    assert "'open_complaints'" in line and "[plan] exclude" in line and "['open']" in line
