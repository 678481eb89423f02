"""A company's own export (tests/_brackwater.py) with one fault at a time: each is refused by
`lifecycle check` and `lifecycle run` with exit 2 and one message naming the table, the
export's own column name beside ours, a count and example ids, and nothing is written in the
data, output or work folders (their listing, with sizes and modification times, is unchanged).

The faults are written by hand into the export, so the expected counts and ids are known.
"""

from __future__ import annotations

import shutil
import warnings
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from shapely.geometry import box

from lifecycle.cli import main
from lifecycle.config import load_config
from lifecycle.data import load_tables
from lifecycle.spatial import premise_areas
from tests._brackwater import CRS, X0, Y0, brackwater_zones, write_brackwater


@pytest.fixture(scope="module")
def template(tmp_path_factory) -> Path:
    return write_brackwater(tmp_path_factory.mktemp("brackwater") / "data").parent


@pytest.fixture
def export(template, tmp_path) -> Path:
    folder = tmp_path / "data"
    shutil.copytree(template, folder)
    return folder


def _listing(root: Path) -> list[tuple[str, int, int]]:
    return sorted(
        (str(p.relative_to(root)), p.stat().st_size, p.stat().st_mtime_ns) for p in root.rglob("*")
    )


def _table(export: Path, stem: str) -> pd.DataFrame:
    return pd.read_csv(export / f"{stem}.csv", dtype=str, keep_default_na=False)


def _save(export: Path, stem: str, frame: pd.DataFrame) -> None:
    frame.to_csv(export / f"{stem}.csv", index=False)


def _settings(export: Path, old: str, new: str) -> None:
    path = export / "lifecycle.toml"
    text = path.read_text(encoding="utf-8")
    assert old in text
    path.write_text(text.replace(old, new), encoding="utf-8")


def _refused(export: Path, capsys, *needles: str, commands=("check", "run")) -> str:
    """Run each command; each exits 2 with one line holding every needle, writing nothing."""
    root = export.parent
    message = ""
    for command in commands:
        argv = ["check", str(export)] if command == "check" else ["run", "--config"]
        if command == "run":
            argv.append(str(export / "lifecycle.toml"))
        before = _listing(root)
        code = main(argv)
        err = capsys.readouterr().err.strip().splitlines()
        assert code == 2, (command, err)
        assert len(err) == 1, err
        message = err[0]
        for needle in needles:
            assert needle in message, (needle, message)
        assert _listing(root) == before, f"{command} wrote something"
    return message


# --- item 2: the extract month ----------------------------------------------------------------


def test_check_prints_the_extract_month_it_inferred(export, capsys):
    # The generator's activity runs to 2026-03, the last month dated anywhere (known truth).
    assert main(["check", str(export)]) == 0
    assert "extract month: 2026-03" in capsys.readouterr().out


def test_an_as_of_month_after_the_inferred_extract_month_is_refused(export, capsys):
    root = export.parent
    before = _listing(root)
    argv = ["run", "--config", str(export / "lifecycle.toml"), "--as-of", "2026-05"]
    assert main(argv) == 2
    assert "only covers months up to 2026-03" in capsys.readouterr().err
    assert _listing(root) == before


# --- item 3: formats --------------------------------------------------------------------------


@pytest.mark.parametrize("value", ["2024-01-45", "2024-13", "0001-01", "2201-01-01", "2023-02-29"])
def test_impossible_dates_are_refused_naming_the_export_column(export, capsys, value):
    accounts = _table(export, "accounts")
    accounts.loc[[3, 7], "connected_on"] = value
    _save(export, "accounts", accounts)
    ids = accounts.loc[[3, 7], "account_ref"].tolist()
    _refused(export, capsys, "table 'customers'", "column 'connected_on' (start_month)",
             "2 rows", *ids, value)  # fmt: skip


def test_dates_in_a_format_of_their_own_need_it_in_formats(export, capsys):
    accounts = _table(export, "accounts")
    days = pd.to_datetime(accounts["connected_on"])
    accounts["connected_on"] = days.dt.strftime("%d/%m/%Y")
    _save(export, "accounts", accounts)
    _refused(export, capsys, "column 'connected_on' (start_month)", "[formats]",
             commands=("check",))  # fmt: skip
    _settings(export, "[tables]", '[formats]\ncustomers = "%d/%m/%Y"\n\n[tables]')
    assert main(["check", str(export)]) == 0
    assert "starts 2015-" in capsys.readouterr().out


def test_iso_date_times_and_flag_words_in_any_case_are_read(export, capsys):
    reads = _table(export, "meter_reads")
    reads["reading_date"] = reads["reading_date"] + "T08:15:00Z"
    _save(export, "meter_reads", reads)
    accounts = _table(export, "accounts")
    accounts["no_marketing"] = accounts["no_marketing"].map({"Y": "yes", "y": "TRUE"}).fillna("no")
    _save(export, "accounts", accounts)
    assert main(["check", str(export)]) == 0
    assert f"activity: {len(reads):,} rows, 2023-10 to 2026-03" in capsys.readouterr().out


def test_a_flag_that_is_no_flag_word_is_refused(export, capsys):
    accounts = _table(export, "accounts")
    accounts.loc[5, "payment_plan"] = "maybe"
    _save(export, "accounts", accounts)
    _refused(export, capsys, "column 'payment_plan' (hardship)", "1 row",
             accounts.loc[5, "account_ref"], "maybe")  # fmt: skip


def test_campaign_arm_labels_not_mapped_are_refused(export, capsys):
    promotions = _table(export, "promotions")
    promotions.loc[0, "group"] = "X"
    _save(export, "promotions", promotions)
    _refused(export, capsys, "column 'group' (arm)", "1 row", promotions.loc[0, "account_ref"],
             "[campaigns] arms")  # fmt: skip


# --- item 4: campaign offer codes -------------------------------------------------------------


def test_a_campaign_offer_code_not_configured_is_refused(export, capsys):
    _settings(export, 'offers = { RET10 = "loyalty_credit" }\n', "")
    promotions = _table(export, "promotions")
    message = _refused(export, capsys, "table 'campaigns'", "column 'promo_code' (offer)",
                       "RET10", "loyalty_credit", "leak_cover_trial")  # fmt: skip
    assert f"{len(promotions)} rows" in message


# --- item 5: areas ----------------------------------------------------------------------------


def _zones(export: Path, zones: gpd.GeoDataFrame, name: str = "zones.gpkg") -> None:
    (export / "zones.gpkg").unlink()
    with warnings.catch_warnings():  # writing zones without a CRS is the point of some tests
        warnings.simplefilter("ignore", UserWarning)
        zones.to_file(export / name, driver="GPKG" if name.endswith("gpkg") else "GeoJSON")
    if name != "zones.gpkg":
        _settings(export, 'areas = "zones.gpkg"', f'areas = "{name}"')


def test_overlapping_zones_are_refused_unless_a_rule_is_chosen(export, capsys):
    zones = brackwater_zones()
    # A fifth zone over the middle of the district overlaps all four (drawn by hand).
    extra = gpd.GeoDataFrame(
        {"zone_code": ["MID"], "rental_share": [0.3], "flats_share": [0.2]},
        geometry=[box(X0 + 1500, Y0 + 1500, X0 + 2500, Y0 + 2500)],
        crs=CRS,
    )
    _zones(export, pd.concat([zones, extra], ignore_index=True))
    accounts = _table(export, "accounts")
    x, y = accounts["easting"].astype(float) - X0, accounts["northing"].astype(float) - Y0
    inside = accounts.loc[x.between(1500, 2500) & y.between(1500, 2500), "account_ref"]
    assert len(inside)  # the generator puts premises there
    message = _refused(export, capsys, "table 'areas'", "4 pair(s) of areas that overlap",
                       "BRK-N & MID", f"{len(inside)} premise(s)", inside.iloc[0],
                       '[spatial] overlaps = "smallest"')  # fmt: skip
    assert "MARL-W & MID" in message
    _settings(export, "[run]", '[spatial]\noverlaps = "smallest"\n\n[run]')
    assert main(["check", str(export)]) == 0
    # The rule: a premise in MID (1 km², drawn by hand) and a corner zone (4 km²) takes MID.
    config = load_config(export / "lifecycle.toml")
    areas = premise_areas(load_tables(export, config), config)
    assert (areas.loc[inside.to_numpy()] == "MID").all()
    assert (areas.drop(inside.to_numpy()) != "MID").all()


def test_zones_without_a_crs_are_named_as_such(export, capsys):
    _zones(export, brackwater_zones().set_crs(None, allow_override=True))
    _refused(export, capsys, "table 'areas'", "zones.gpkg has no CRS", "[data] areas_crs")


def test_zones_in_geojson_without_a_crs_are_not_blamed_on_the_premises(export, capsys):
    _zones(export, brackwater_zones().set_crs(None, allow_override=True), "zones.geojson")
    _refused(export, capsys, "table 'areas'", "zones.geojson says its CRS is EPSG:4326",
             "not degrees")  # fmt: skip


def test_swapped_coordinates_are_named_as_the_likely_cause(export, capsys):
    accounts = _table(export, "accounts")
    accounts = accounts.rename(columns={"easting": "northing", "northing": "easting"})
    _save(export, "accounts", accounts)
    _refused(export, capsys, "premise lies in no area", "300 rows", "(x, y)",
             "with x and y swapped")  # fmt: skip


def test_a_zone_attribute_name_that_is_not_an_identifier_is_refused(export, capsys):
    _zones(export, brackwater_zones().rename(columns={"flats_share": "flats share"}))
    _refused(export, capsys, "table 'areas'", "column 'flats share'", "letters, digits and _")


def test_a_zone_attribute_value_that_is_not_a_number_is_refused(export, capsys):
    zones = brackwater_zones()
    zones["rental_share"] = ["0.42", "n/a", "0.27", "n/a"]
    _zones(export, zones)
    _refused(export, capsys, "table 'areas'", "column 'rental_share'", "2 rows", "BRK-S",
             "MARL-W", "n/a")  # fmt: skip


# --- item 6: tables ---------------------------------------------------------------------------


def test_a_repeated_csv_header_is_refused(export, capsys):
    text = (export / "accounts.csv").read_text().splitlines()
    text[0] = text[0] + ",monthly_contribution"
    text[1:] = [line + ",1" for line in text[1:]]
    (export / "accounts.csv").write_text("\n".join(text) + "\n")
    _refused(export, capsys, "column 'monthly_contribution' (monthly_margin)",
             "more than once in the header")  # fmt: skip


def test_a_repeated_parquet_header_is_refused(export, capsys):
    import pyarrow as pa
    import pyarrow.parquet as pq

    reads = _table(export, "meter_reads")
    columns = [pa.array(reads[c]) for c in reads.columns] + [pa.array(reads["usage_m3"])]
    names = [*reads.columns, "usage_m3"]
    pq.write_table(pa.Table.from_arrays(columns, names=names), export / "meter_reads.parquet")
    (export / "meter_reads.csv").unlink()
    _settings(export, 'activity = "meter_reads.csv"', 'activity = "meter_reads.parquet"')
    _refused(export, capsys, "table 'activity'", "'usage_m3'", "more than once in the header")


@pytest.mark.parametrize("value", ["1e300", "inf", "-inf", "nan"])
def test_absurd_or_non_finite_margins_are_refused(export, capsys, value):
    accounts = _table(export, "accounts")
    accounts.loc[9, "monthly_contribution"] = value
    _save(export, "accounts", accounts)
    _refused(export, capsys, "column 'monthly_contribution' (monthly_margin)", "1 row",
             accounts.loc[9, "account_ref"])  # fmt: skip


def test_absurd_activity_values_are_refused(export, capsys):
    reads = _table(export, "meter_reads")
    reads.loc[4, "usage_m3"] = "1e300"
    _save(export, "meter_reads", reads)
    _refused(export, capsys, "table 'activity'", "column 'usage_m3'", "absurd", "1 row")


def test_a_product_name_that_cannot_be_a_column_name_is_refused(export, capsys):
    services = _table(export, "services")
    rows = services["service"] == "smart_alerts"
    services.loc[rows, "service"] = "smart alerts"
    _save(export, "services", services)
    _refused(export, capsys, "column 'service' (product)", f"{int(rows.sum())} rows",
             "smart alerts", "letters, digits and _")  # fmt: skip


def test_a_huge_id_is_cut_in_the_message(export, capsys):
    accounts = _table(export, "accounts")
    huge = "BW-" + "9" * 100_000
    accounts.loc[[0, 1], "account_ref"] = huge
    _save(export, "accounts", accounts)
    message = _refused(export, capsys, "column 'account_ref' (customer_id)", "is not unique",
                       "BW-999", "…", commands=("check",))  # fmt: skip
    assert len(message) < 1_000
    assert np.char.count(message, "9").item() < 100
