"""The cycle on a Dask cluster equals the single-process run.

One local cluster of 2 worker processes on loopback serves the whole module. The reference of
every equality is the single-process function of this package on the same invented demo
(`lifecycle.demo`); the tiled nearby counts are also checked against a brute-force count with
scipy's KD-tree (`scipy.spatial.cKDTree.query_ball_point`).
"""

from __future__ import annotations

import itertools
import json
import shutil

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.spatial import cKDTree

from lifecycle.config import Config, load_config
from lifecycle.cycle import Scored
from lifecycle.cycle._steps import forecast_extras
from lifecycle.data import load_tables, read_raw_tables
from lifecycle.decisions import Offer
from lifecycle.demo import write_demo
from lifecycle.distributed import (
    compute_client,
    compute_settings,
    distribute_tables,
    forecast_portfolio,
    landmark_snapshots,
    offer_values,
    panel_with_context,
    sample_customers,
    score_portfolio,
    snapshot_with_context,
)
from lifecycle.distributed._context import _points, _tile
from lifecycle.distributed._tables import NEVER, Summary
from lifecycle.errors import InputError, UsageError
from lifecycle.forecast import forecast_settings, forecast_uptake
from lifecycle.models import CauseSpecificCox, score_customers
from lifecycle.models import landmark_snapshots as single_landmarks
from lifecycle.models._base import survival_from_hazards
from lifecycle.panel import build_panel, build_snapshot
from lifecycle.spatial import add_spatial_context, premise_areas
from lifecycle.value import lifetime_value, value_settings
from lifecycle.value import offer_values as single_offer_values

AS_OF = "2026-10"


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    folder = tmp_path_factory.mktemp("distributed") / "demo"
    write_demo(folder, customers=2000, seed=7)
    config = load_config(folder / "lifecycle.toml")
    return folder, config, load_tables(folder, config)


@pytest.fixture(scope="module")
def client():
    with compute_client(workers=2) as client:
        yield client


@pytest.fixture(scope="module")
def single(demo):
    _, config, tables = demo
    panel = add_spatial_context(build_panel(tables, AS_OF, config=config), tables, config=config)
    snapshot = build_snapshot(tables, AS_OF, config=config)
    snapshot = add_spatial_context(snapshot, tables, config=config)
    return panel, snapshot


@pytest.fixture(scope="module")
def data(client, demo):
    folder, config, _ = demo
    # read and checked by a worker from the demo folder, split into 3 partitions there
    return distribute_tables(client, folder, config=config, partitions=3)


@pytest.fixture(scope="module")
def panel(data):
    return panel_with_context(data, AS_OF)


def test_panel_with_context_equals_the_single_process_panel(panel, single):
    assert panel.npartitions == 3
    # same rows, order, columns, dtypes (categories included) and values, bit for bit:
    # each partition runs the same functions on the same numbers
    pd.testing.assert_frame_equal(
        panel.compute().reset_index(drop=True), single[0], check_exact=True
    )


@pytest.fixture(scope="module")
def seven(client, demo):
    # 7 partitions (and so 7 tiles of premises with halos) of Tables split in this process
    _, config, tables = demo
    return distribute_tables(client, tables, config=config, partitions=7)


def test_more_partitions_change_nothing(seven, demo, single):
    _, config, tables = demo
    pd.testing.assert_frame_equal(
        panel_with_context(seven, AS_OF).compute().reset_index(drop=True),
        single[0],
        check_exact=True,
    )
    no_context = panel_with_context(seven, AS_OF, spatial=False).compute().reset_index(drop=True)
    pd.testing.assert_frame_equal(
        no_context, build_panel(tables, AS_OF, config=config), check_exact=True
    )


def test_snapshot_with_context_equals_the_single_process_snapshot(data, single):
    snapshot = snapshot_with_context(data, AS_OF)
    pd.testing.assert_frame_equal(
        snapshot.compute().reset_index(drop=True), single[1], check_exact=True
    )


def test_landmark_snapshots_equal_the_single_process_ones(panel, single):
    landmarks = landmark_snapshots(panel, horizon=12)
    expected = single_landmarks(single[0], horizon=12)
    assert landmarks.npartitions == expected["month"].nunique()  # one per landmark month
    pd.testing.assert_frame_equal(
        landmarks.compute().reset_index(drop=True), expected, check_exact=True
    )


def test_folders_of_parquet_parts_give_the_same_panel(client, demo, single, tmp_path):
    folder, config, _ = demo
    raw = read_raw_tables(folder, config)
    parts = tmp_path / "parts"
    parts.mkdir()
    for name in ("areas.geojson", "campaigns.csv"):
        shutil.copy(folder / name, parts / name)
    (parts / "customers").mkdir()
    n = len(raw.customers)
    cuts = [0, n // 4, n // 4, n // 2, n]  # the second part is empty and is skipped
    for i, (a, b) in enumerate(itertools.pairwise(cuts)):
        raw.customers.iloc[a:b].to_parquet(parts / "customers" / f"part-{i}.parquet", index=False)
    # activity in hive-style folders whose rows mix customers of every partition
    shuffled = np.random.default_rng(3).permutation(len(raw.activity))
    for i, rows in enumerate(np.array_split(shuffled, 3)):
        (parts / "activity" / f"chunk={i}").mkdir(parents=True)
        path = parts / "activity" / f"chunk={i}" / "data.parquet"
        raw.activity.iloc[np.sort(rows)].to_parquet(path, index=False)
    (parts / "uptakes").mkdir()
    raw.uptakes.iloc[::-1].to_parquet(parts / "uptakes" / "all.parquet", index=False)

    data = distribute_tables(client, parts, config=config)
    assert data.npartitions == 3
    pd.testing.assert_frame_equal(
        panel_with_context(data, AS_OF).compute().reset_index(drop=True),
        single[0],
        check_exact=True,
    )

    # bad data in a part comes back as one InputError naming table, column and rows
    bad = pd.read_parquet(parts / "activity" / "chunk=1" / "data.parquet")
    bad.loc[bad.index[4], "customer_id"] = "nobody"
    bad.to_parquet(parts / "activity" / "chunk=1" / "data.parquet", index=False)
    with pytest.raises(InputError, match="not in the customers table") as caught:
        distribute_tables(client, parts, config=config)
    assert (caught.value.table, caught.value.column, caught.value.count) == (
        "activity",
        "customer_id",
        1,
    )
    assert caught.value.examples == ["nobody"]
    twin = raw.customers.iloc[n // 2 : n // 2 + 3].copy()
    twin["customer_id"] = raw.customers["customer_id"].iloc[:3].to_numpy()
    twin.to_parquet(parts / "customers" / "part-9.parquet", index=False)
    with pytest.raises(InputError, match="is not unique") as caught:
        distribute_tables(client, parts, config=config)
    assert caught.value.count == 6


@pytest.fixture(scope="module")
def model(panel):
    # fitted in one process on whole customers drawn at random (a quarter of them)
    return CauseSpecificCox(sample_fraction=0.3).fit(sample_customers(panel, 0.25, seed=1))


def test_sample_customers_keeps_whole_customers_whatever_the_partitions(panel, seven):
    sample = sample_customers(panel, 0.25, seed=1)
    whole = panel.compute().reset_index(drop=True)
    drawn = whole["customer_id"].isin(sample["customer_id"].unique())
    pd.testing.assert_frame_equal(sample, whole[drawn].reset_index(drop=True))
    share = sample["customer_id"].nunique() / whole["customer_id"].nunique()
    assert 0.2 < share < 0.3  # binomial sd at 2,000+ customers is below 0.01
    other = panel_with_context(seven, AS_OF, spatial=False)
    expected = sample[list(other.partitions[0].compute().columns)]
    pd.testing.assert_frame_equal(sample_customers(other, 0.25, seed=1), expected)
    assert not sample_customers(panel, 0.25, seed=2).equals(sample)
    with pytest.raises(UsageError, match="fraction"):
        sample_customers(panel, 0.0)


def test_scores_values_and_forecast_equal_the_single_process_ones(data, model, single, demo):
    _, config, tables = demo
    snapshot = single[1]
    value = value_settings(config)
    months = max(12, value.horizon_months, forecast_settings(config).horizon_months)
    hazards = model.hazard_array(snapshot, months)
    expected = score_customers(model, snapshot, (3, 6, 12), hazards=hazards)
    expected["lifetime_value"] = lifetime_value(
        survival_from_hazards(hazards, 3)[:, : value.horizon_months],
        snapshot["monthly_margin"].to_numpy(dtype=np.float64),
        annual_discount=value.annual_discount,
    )
    scored = score_portfolio(data, model, AS_OF)
    # floating-point tolerance: matrix products over a partition's rows may round differently
    pd.testing.assert_frame_equal(
        scored.scores.compute().reset_index(drop=True), expected, rtol=1e-9, atol=1e-12
    )

    offers = [
        Offer(name="credit", target="churn", cost=10.0, hazard_ratio=0.7, months=6),
        Offer(name="trial", target="uptake_backup_line", cost=2.0, hazard_ratio=1.5, months=3),
    ]
    ids = snapshot["customer_id"].to_numpy()
    margin = snapshot["monthly_margin"].to_numpy(dtype=np.float64)
    expected_offers = single_offer_values(
        hazards, model.causes_, margin, offers, annual_discount=value.annual_discount,
        horizon=value.horizon_months, customer_ids=ids,
    )  # fmt: skip
    got = offer_values(scored, offers).compute().reset_index(drop=True)
    pd.testing.assert_frame_equal(got, expected_offers, rtol=1e-9, atol=1e-9)

    fc = forecast_settings(config)
    areas = premise_areas(tables, config).reindex(ids).to_numpy()
    expected_forecast = forecast_uptake(
        hazards[:, : fc.horizon_months], model.causes_, start_month="2026-11", areas=areas,
        levels=fc.levels, method=fc.method, exact_max=fc.exact_max, customer_ids=ids,
    )  # fmt: skip
    got = forecast_portfolio(data, scored)
    assert got["area_id"].nunique() > 2  # the total and several areas
    pd.testing.assert_frame_equal(got, expected_forecast, rtol=1e-9, atol=1e-9)

    # with the joiners and the draws of the models' uncertainty (computed once, driver-side)
    extras = forecast_extras(tables, model, Scored(snapshot, None, (), 0, None), config)
    assert extras["joiners"] and extras["level_draws"]
    expected_forecast = forecast_uptake(
        hazards[:, : fc.horizon_months], model.causes_, start_month="2026-11", areas=areas,
        levels=fc.levels, method=fc.method, exact_max=fc.exact_max, customer_ids=ids, **extras,
    )  # fmt: skip
    got = forecast_portfolio(data, scored, extras=extras)
    assert (got["expected_joiners"] > 0).any()
    pd.testing.assert_frame_equal(got, expected_forecast, rtol=1e-9, atol=1e-9)


def test_results_are_dask_frames_of_whole_customers_in_order(panel, single):
    """The panel is a dask DataFrame: one partition per partition of customers, each holding
    whole customers in table order, so that dask's own operations apply partition-wise."""
    import dask.dataframe as dd

    assert isinstance(panel, dd.DataFrame) and panel.npartitions == 3
    assert len(panel) == len(single[0])
    heads = panel.map_partitions(lambda frame: frame.iloc[:2]).compute()
    assert heads["customer_id"].nunique() == 3  # two rows of the first customer of each
    firsts = [panel.partitions[i].compute()["customer_id"].iloc[0] for i in range(3)]
    order = pd.Index(single[0]["customer_id"].drop_duplicates())
    assert list(order.get_indexer(firsts)) == sorted(order.get_indexer(firsts))
    assert (panel.dtypes == single[0].dtypes).all()  # text stays as pandas types it


# --- tiles and halos against a brute-force count ---------------------------------------------


@settings(max_examples=25, deadline=None)
@given(
    seed=st.integers(0, 2**32 - 1),
    n=st.integers(1, 120),
    tiles=st.integers(1, 6),
    radius=st.sampled_from([5.0, 25.0, 80.0]),
)
def test_tiles_with_halos_count_every_neighbour(seed, n, tiles, radius):
    rng = np.random.default_rng(seed)
    # clustered premises on a grid of 1 m, so that ties at the radius happen
    x = np.round(rng.normal(0, 60, n))
    y = np.round(rng.normal(0, 30, n))
    start = rng.integers(0, 6, n)
    end = np.where(rng.random(n) < 0.5, np.nan, start + rng.integers(0, 6, n)).astype(float)
    uptake = np.where(rng.random(n) < 0.5, NEVER, start + rng.integers(0, 4, n))[:, None]
    cut = int(rng.integers(0, n + 1))  # two partitions of customers
    summaries = [
        Summary(
            ids=np.arange(a, b), start=start[a:b], end=end[a:b],
            moved_out=np.zeros(b - a, bool), area=np.zeros(b - a, np.int64), x=x[a:b],
            y=y[a:b], uptake=uptake[a:b], levels={},
        )
        for a, b in ((0, cut), (cut, n))
    ]  # fmt: skip
    offsets = np.array([0, cut, n])
    first, last = 1, 8
    points = _points(summaries, offsets, first, last, tiles)
    counts = np.full((n, 2, last - first + 1), -1, dtype=np.int64)
    for t in range(tiles):
        for p, (positions, by_radius) in enumerate(_tile(points, t, (radius,), last - first + 1)):
            counts[positions + offsets[p]] = by_radius[0]

    # brute force: every pair within the radius (boundary included), by scipy's KD-tree
    neighbours = cKDTree(np.column_stack([x, y])).query_ball_point(np.column_stack([x, y]), radius)
    end_i = np.where(np.isnan(end), NEVER, end).astype(np.int64)
    for i in np.flatnonzero((start <= last) & (end_i >= first)):
        others = np.array([j for j in neighbours[i] if j != i], dtype=np.int64)
        for m in range(first, last + 1):
            customer = (start[others] + 1 <= m) & (m <= end_i[others])
            holder = customer & (np.maximum(start[others], uptake[others, 0]) + 1 <= m)
            assert counts[i, 0, m - first] == customer.sum()
            assert counts[i, 1, m - first] == holder.sum()


# --- the client and its settings ----------------------------------------------------------------


def test_compute_settings_and_refusals(tmp_path):
    text = '[compute]\nscheduler = "tcp://10.1.2.3:8786"\nworkers = 3\npartition_customers = 5000\n'
    (tmp_path / "a.toml").write_text(text, encoding="utf-8")
    got = compute_settings(load_config(tmp_path / "a.toml"))
    assert (got.scheduler, got.workers, got.partition_customers) == ("tcp://10.1.2.3:8786", 3, 5000)
    assert compute_settings(Config()).partition_customers == 100_000
    (tmp_path / "b.toml").write_text("[compute]\nworkers = 0\n", encoding="utf-8")
    with pytest.raises(UsageError, match="workers was 0"):
        compute_settings(load_config(tmp_path / "b.toml"))
    (tmp_path / "c.toml").write_text("[compute]\nthreads = 2\n", encoding="utf-8")
    with pytest.raises(UsageError, match="unknown setting"):
        compute_settings(load_config(tmp_path / "c.toml"))
    with pytest.raises(UsageError, match="give one of them"):
        with compute_client(workers=2, address="tcp://127.0.0.1:1"):
            pass
    with pytest.raises(UsageError, match="no cluster"):
        with compute_client():
            pass


def test_as_of_after_the_extract_month_is_refused(data):
    with pytest.raises(UsageError, match="only covers months up to 2026-10"):
        panel_with_context(data, "2026-11")


def test_a_running_scheduler_named_in_the_config(client, tmp_path):
    address = client.scheduler.address
    (tmp_path / "c.toml").write_text(f'[compute]\nscheduler = "{address}"\n', encoding="utf-8")
    with compute_client(config=load_config(tmp_path / "c.toml")) as other:
        assert other.scheduler.address == address
        assert other.submit(sum, [1, 2]).result() == 3
        assert set(other.scheduler_info()["workers"]) == set(client.scheduler_info()["workers"])
    assert client.submit(sum, [3, 4]).result() == 7  # the cluster outlives the second client


def test_the_monthly_cycle_on_the_cluster_writes_the_same_files(client, tmp_path):
    """`run_cycle` with a client (scoring, offer values and forecast on the workers) writes
    the scores, plan, forecast and key figures of the single-process run: the same rows,
    numbers equal up to floating-point rounding. The second run reuses the first one's
    backtest and model (same work folder), so both score with the same model."""
    from lifecycle.cycle import run_cycle

    folder = tmp_path / "data"
    paths = write_demo(folder, customers=1500, seed=5)
    text = (
        paths["config"]
        .read_text()
        .replace('families = ["cox", "boosted", "forest"]', 'families = ["cox"]')
    )
    paths["config"].write_text(text)
    config = load_config(paths["config"])
    one = run_cycle(folder, config, reports=tmp_path / "one")
    two = run_cycle(folder, config, reports=tmp_path / "two", client=client)
    for name in ("scores", "plan", "forecast"):
        a, b = pd.read_csv(one.files[name]), pd.read_csv(two.files[name])
        pd.testing.assert_frame_equal(a, b, rtol=1e-9, atol=1e-9)
    assert len(pd.read_csv(one.files["plan"])) > 0
    figures = [json.loads(r.files["key_figures"].read_text()) for r in (one, two)]
    assert figures[0].keys() == figures[1].keys()
    for key, value in figures[0].items():
        if isinstance(value, float):
            assert figures[1][key] == pytest.approx(value, rel=1e-9, abs=1e-12), key
        elif not isinstance(value, dict | list):
            assert figures[1][key] == value, key


def _bad_dates(n_rows: int) -> None:
    """A task that fails on its input (module level, so that a worker can unpickle it)."""
    raise InputError(
        table="customers", column="end_month", problem="is before start_month", count=n_rows,
        examples=["A1", "B2"], fix="mend the dates", source_column="leave_date",
    )  # fmt: skip


def test_every_error_survives_pickling_with_its_fields():
    """pickle.loads(pickle.dumps(err)) is the same error: same class, message and fields (the
    standard library's exception pickling calls ``cls(*args)``, which keyword-only
    `InputError` cannot take without help)."""
    import pickle

    from lifecycle import errors

    with pytest.raises(InputError) as caught:
        _bad_dates(2)
    again = pickle.loads(pickle.dumps(caught.value))
    assert type(again) is InputError
    assert again.fields() == caught.value.fields()
    assert again.source_column == "leave_date" and str(again) == str(caught.value)
    for name in errors.__all__:
        kind = getattr(errors, name)
        if isinstance(kind, type) and kind is not InputError:
            err = kind("something is wrong")
            back = pickle.loads(pickle.dumps(err))
            assert type(back) is kind and str(back) == str(err), name


def test_an_input_error_raised_in_a_task_reaches_the_caller_with_its_fields(client):
    """A plain task (no wrapper) that raises `InputError` on a worker: the caller catches an
    `InputError` with every field as raised, the export's own column name included."""
    with pytest.raises(InputError) as caught:
        client.submit(_bad_dates, 3, pure=False).result()
    assert type(caught.value) is InputError
    assert caught.value.fields() == {
        "table": "customers", "column": "end_month", "problem": "is before start_month",
        "count": 3, "examples": ["A1", "B2"], "fix": "mend the dates",
        "source_column": "leave_date",
    }  # fmt: skip
    assert "column 'leave_date' (end_month)" in str(caught.value)
