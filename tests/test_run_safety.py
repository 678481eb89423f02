"""`lifecycle run` writes nothing on failure, runs one at a time per reports folder, keeps the
history equal to the published month folders, and never loads a tampered saved model."""

from __future__ import annotations

import errno
import hashlib
import json
import os
import pickle
import shutil
import subprocess
import sys
import time
import uuid
from pathlib import Path

import pandas as pd
import pytest

from lifecycle.cli import main
from lifecycle.config import load_config
from lifecycle.cycle import run_cycle
from lifecycle.demo import write_demo
from lifecycle.history._store import ScoreHistory
from tests.test_model_signing import Payload

ROOT = Path(__file__).resolve().parents[1]


def _digest(folder: Path) -> dict[str, str]:
    """Every file under ``folder`` (hidden ones too) with its SHA-256."""
    if not folder.exists():
        return {}
    return {
        str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


def _demo(root: Path, seed: int = 3) -> Path:
    paths = write_demo(root / "data", customers=600, seed=seed)
    text = (
        paths["config"].read_text().replace('families = ["cox", "boosted"]', 'families = ["cox"]')
    )
    paths["config"].write_text(text)
    return paths["config"]


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    """The demo with month 2026-09 run: data/, reports/ and .lifecycle-work/ under one root."""
    root = tmp_path_factory.mktemp("base")
    config = _demo(root)
    run_cycle(root / "data", load_config(config), as_of="2026-09")
    return root


@pytest.fixture
def root(base, tmp_path):
    shutil.copytree(base, tmp_path / "r", symlinks=True)
    return tmp_path / "r"


def _run(root: Path, *args: str) -> int:
    return main(["run", "--config", str(root / "data" / "lifecycle.toml"), *args])


def _assert_history_matches_folders(reports: Path) -> None:
    history = ScoreHistory(reports / "history.duckdb")
    folders = sorted(p.name for p in reports.iterdir() if p.is_dir() and not p.name.startswith("."))
    assert history.months() == folders
    for month in folders:
        published = pd.read_csv(reports / month / "scores.csv")
        stored = history.scores(month)
        assert len(stored) == len(published)
        assert stored["lifetime_value"].mean() == pytest.approx(published["lifetime_value"].mean())
        plan = pd.read_csv(reports / month / "contact_plan.csv")
        assert len(history.plan(month)) == len(plan)
        summary = json.loads((reports / month / "run_summary.json").read_text())
        assert history.run(month).data_hash == summary["data_sha256"]


def test_a_failed_run_leaves_reports_and_work_byte_identical(root, monkeypatch):
    import lifecycle.report as report

    before = (_digest(root / "reports"), _digest(root / ".lifecycle-work"))

    def broken(*args, **kwargs):
        raise RuntimeError("report writer broke")

    monkeypatch.setattr(report, "write_report", broken)
    assert _run(root, "--as-of", "2026-10") == 1
    assert (_digest(root / "reports"), _digest(root / ".lifecycle-work")) == before


def test_a_refused_month_creates_no_folders(tmp_path):
    config = _demo(tmp_path)
    assert main(["run", "--config", str(config), "--as-of", "2027-05"]) == 2
    assert sorted(p.name for p in tmp_path.iterdir()) == ["data"]  # no reports/, no work folder


def test_a_full_disk_is_one_message_and_changes_nothing(root, monkeypatch, capsys):
    """ENOSPC simulated on the first write into the staging folder."""
    import lifecycle._files as files

    real = files.write_atomic

    def full(dest, write):
        if ".staging-" in str(dest):
            raise OSError(errno.ENOSPC, "No space left on device", str(dest))
        return real(dest, write)

    before = (_digest(root / "reports"), _digest(root / ".lifecycle-work"))
    monkeypatch.setattr(files, "write_atomic", full)
    assert _run(root, "--as-of", "2026-10") == 1
    err = capsys.readouterr().err
    messages = [line for line in err.splitlines() if line.startswith("lifecycle run:")]
    assert len(messages) == 1 and "no space left" in messages[0] and "Traceback" not in err
    assert (_digest(root / "reports"), _digest(root / ".lifecycle-work")) == before
    assert ScoreHistory(root / "reports" / "history.duckdb").months() == ["2026-09"]


def test_a_failed_history_write_takes_the_month_back(root, monkeypatch):
    """The history and the month folder are one unit: if the history write fails after the
    folder was renamed into place, the folder goes again (and, with --force, the old one
    comes back)."""
    before = _digest(root / "reports")

    def broken(self, *args, **kwargs):
        raise RuntimeError("history broke")

    monkeypatch.setattr(ScoreHistory, "append_run", broken)
    assert _run(root, "--as-of", "2026-10") == 1
    assert _run(root, "--as-of", "2026-09", "--force") == 1
    assert _digest(root / "reports") == before


def test_a_crash_between_publishing_and_the_history_is_mended_at_the_next_start(root):
    """A real crash (``os._exit``) right after the rename; the next start writes the month's
    history rows from the journal."""
    script = (
        "import os, sys\n"
        "import lifecycle.cycle._publish as p\n"
        "p._append = lambda history, entry: os._exit(3)\n"
        "from lifecycle.cli import main\n"
        "sys.exit(main(sys.argv[1:]))\n"
    )
    config = str(root / "data" / "lifecycle.toml")
    done = subprocess.run(
        [sys.executable, "-c", script, "run", "--config", config, "--as-of", "2026-10"],
        cwd=ROOT,
        capture_output=True,
    )
    assert done.returncode == 3, done.stderr.decode()[-2000:]
    reports = root / "reports"
    assert (reports / "2026-10").is_dir() and any(reports.glob(".journal-2026-10"))
    assert ScoreHistory(reports / "history.duckdb").months() == ["2026-09"]
    assert _run(root, "--as-of", "2026-10") == 2  # refused (month exists), after mending
    assert not any(reports.glob(".journal-*"))
    _assert_history_matches_folders(reports)


def test_a_month_moved_aside_by_a_crashed_forced_run_is_put_back(root):
    reports = root / "reports"
    before = _digest(reports / "2026-09")
    os.replace(reports / "2026-09", reports / ".replaced-2026-09-99999")
    assert _run(root, "--as-of", "2026-09") == 2  # refused: the month is back in place
    assert _digest(reports / "2026-09") == before
    _assert_history_matches_folders(reports)


def test_stale_staging_folders_are_removed_at_the_next_start(root):
    """What a killed run leaves (here placed by hand; `test_run_kill` kills real runs)."""
    reports = root / "reports"
    (reports / ".staging-2026-10-99999").mkdir()
    (reports / ".staging-2026-10-99999" / "scores.csv").write_text("half")
    (root / ".lifecycle-work" / "staging-2026-10-99998").mkdir()  # where older versions put it
    assert _run(root, "--as-of", "2026-09") == 2
    assert not any(reports.glob(".staging-*"))
    assert not any((root / ".lifecycle-work").glob("staging-*"))


def test_a_second_run_is_refused_at_once_naming_the_first(root, tmp_path, capsys):
    """Two runs with different data on one reports folder: the second is refused while the
    first holds the lock, and the history matches the published folder afterwards."""
    other = tmp_path / "other"
    config_b = _demo(other, seed=8)
    text = config_b.read_text().replace('reports = "../reports"', f'reports = "{root / "reports"}"')
    config_b.write_text(text)
    reports = root / "reports"
    log_file = tmp_path / "first.err"
    with open(log_file, "wb") as err_out:
        first = subprocess.Popen(
            [sys.executable, "-m", "lifecycle", "run", "--config",
             str(root / "data" / "lifecycle.toml"), "--as-of", "2026-10"],
            cwd=ROOT, stdout=subprocess.DEVNULL, stderr=err_out,
        )  # fmt: skip
        try:
            waited = 0
            while not (reports / "run.lock.owner.json").exists() and first.poll() is None:
                time.sleep(0.05)
                waited += 1
                assert waited < 6000
            assert first.poll() is None, log_file.read_text()[-2000:]
            code = main(["run", "--config", str(config_b), "--as-of", "2026-10"])
            err = capsys.readouterr().err
            assert code == 2 and f"process {first.pid}" in err and "another lifecycle run" in err
        finally:
            assert first.wait(timeout=600) == 0, log_file.read_text()[-2000:]
    assert main(["run", "--config", str(config_b), "--as-of", "2026-10"]) == 2  # month exists
    _assert_history_matches_folders(reports)
    assert not (other / ".lifecycle-work").exists()  # the refused runs wrote nothing


def test_a_planted_model_in_the_work_folder_is_never_loaded(root, tmp_path, capsys):
    """The saved model of 2026-09 (reused for 2026-10 on the refit schedule) is replaced by a
    payload with its hash updated in the manifest: the run reports it, refits, and the payload
    never runs."""
    marker = tmp_path / "ran"
    (saved,) = (root / ".lifecycle-work" / "models").glob("champion-2026-09-*")
    (saved / "model.pickle").write_bytes(pickle.dumps(Payload(marker)))
    manifest = json.loads((saved / "manifest.json").read_text())
    manifest["files"]["model.pickle"] = hashlib.sha256(
        (saved / "model.pickle").read_bytes()
    ).hexdigest()
    (saved / "manifest.json").write_text(json.dumps(manifest, indent=2, sort_keys=True) + "\n")
    assert _run(root, "--as-of", "2026-10") == 0  # the log goes to stderr (command line)
    assert not marker.exists()
    err = capsys.readouterr().err
    assert f"not reusing {saved}" in err and "signature" in err
    assert list((root / ".lifecycle-work" / "models").glob("champion-2026-10-*"))


def test_a_tampered_backtest_cache_is_recomputed(root, capsys):
    (saved,) = (root / ".lifecycle-work" / "cache").glob("backtest-2026-09-*")
    frame = pd.read_parquet(saved / "champions.parquet")
    frame["family"] = "life_table"
    frame.to_parquet(saved / "champions.parquet")
    assert _run(root, "--as-of", "2026-10") == 0
    assert f"not reusing {saved}" in capsys.readouterr().err
    summary = json.loads((root / "reports" / "2026-10" / "run_summary.json").read_text())
    assert set(summary["champions"].values()) != {"life_table"}


def _other_file_system() -> Path | None:
    shm = Path("/dev/shm")
    if not shm.is_dir() or not os.access(shm, os.W_OK):
        return None
    if shm.stat().st_dev == Path(__file__).stat().st_dev:
        return None
    return shm


@pytest.mark.parametrize("how", ["mounted", "simulated"])
def test_reports_on_another_file_system(root, monkeypatch, how):
    """The staging folder lives inside the reports folder, so the final rename never crosses
    file systems. "mounted": the reports folder on /dev/shm (tmpfs) while the work folder and
    data stay on the disk; "simulated": every rename between the reports folder and elsewhere
    fails with EXDEV, as it would across file systems."""
    config = root / "data" / "lifecycle.toml"
    if how == "mounted":
        shm = _other_file_system()
        if shm is None:
            pytest.skip("no writable /dev/shm on another file system than the tests")
        reports = shm / f"lifecycle-test-{uuid.uuid4().hex}"
        shutil.copytree(root / "reports", reports)
    else:
        reports = root / "reports"
        real_replace, real_rename = os.replace, os.rename

        def crossing(src, dst):
            inside = [Path(p).resolve().is_relative_to(reports.resolve()) for p in (src, dst)]
            if inside[0] != inside[1]:
                raise OSError(errno.EXDEV, "Invalid cross-device link", str(src), None, str(dst))

        monkeypatch.setattr(os, "replace", lambda s, d: (crossing(s, d), real_replace(s, d))[1])
        monkeypatch.setattr(os, "rename", lambda s, d: (crossing(s, d), real_rename(s, d))[1])
    try:
        text = config.read_text().replace('reports = "../reports"', f'reports = "{reports}"')
        config.write_text(text)
        assert _run(root, "--as-of", "2026-10") == 0
        assert (reports / "2026-10" / "contact_plan.csv").is_file()
        _assert_history_matches_folders(reports)
    finally:
        if how == "mounted":
            shutil.rmtree(reports, ignore_errors=True)


def test_a_full_disk_while_writing_the_history_is_the_same_message(root, monkeypatch, capsys):
    """DuckDB reports a full disk in words (simulated): the month is taken back."""
    import duckdb

    def full(self, *args, **kwargs):
        raise duckdb.IOException('Could not write file "history.duckdb": No space left on device')

    before = _digest(root / "reports")
    monkeypatch.setattr(ScoreHistory, "append_run", full)
    assert _run(root, "--as-of", "2026-10") == 1
    messages = [line for line in capsys.readouterr().err.splitlines() if "lifecycle run:" in line]
    assert len(messages) == 1 and "no space left" in messages[0]
    assert _digest(root / "reports") == before
