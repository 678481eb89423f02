"""Publishing a month: the staging folder, the rename, the history, and mending after a crash.

The month's files are written into ``<reports>/.staging-<month>-<pid>`` (inside the reports
folder, so the final rename never crosses file systems). Publication is one unit with the
history:

1. the history rows of the month are written to ``<reports>/.journal-<month>`` (whole or not
   at all: a folder renamed into place);
2. the staging folder is renamed to ``<reports>/<month>`` (with ``force``, the old month folder
   is first moved aside to ``.replaced-<month>-<pid>``);
3. the month is written to the history in one transaction;
4. the journal and the old folder are removed.

If step 3 fails, step 2 is undone (the old folder comes back). After a crash, the next run
(holding the lock, so no other run is writing) mends the folder before it starts: a month
moved aside with no month folder is put back; a journal whose month folder is in place
(same data fingerprint) is written to the history; other journals, staging folders and moved-
aside months are removed. So the history always matches the published month folders.
"""

from __future__ import annotations

import contextlib
import json
import logging
import os
import shutil
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from .._files import write_parquet_atomic, write_text_atomic
from ..errors import UsageError

log = logging.getLogger(__name__)

STAGING = ".staging-"
JOURNAL = ".journal-"
REPLACED = ".replaced-"


def staging_folder(reports: Path, month: str) -> Path:
    """A fresh, empty staging folder for ``month`` inside ``reports``."""
    staging = reports / f"{STAGING}{month}-{os.getpid()}"
    shutil.rmtree(staging, ignore_errors=True)
    staging.mkdir(parents=True)
    return staging


@dataclass
class HistoryEntry:
    """A month's rows for the score history (`ScoreHistory.append_run`)."""

    month: str
    scores: pd.DataFrame
    plan: pd.DataFrame
    metrics: dict[str, float]
    meta: dict[str, object]


def publish_with_history(staging: Path, folder: Path, entry: HistoryEntry, history, *, force):
    """Steps 1-4 of the module docstring: ``folder`` and the history change together."""
    journal = _write_journal(folder.parent, entry)
    try:
        aside = _rename_into_place(staging, folder, force=force)
        try:
            _append(history, entry)
        except BaseException:
            _undo(folder, aside, staging)
            raise
    finally:
        shutil.rmtree(journal, ignore_errors=True)
    if aside is not None:
        shutil.rmtree(aside, ignore_errors=True)


def mend(reports: Path, history, work: Path | None = None) -> None:
    """Put a reports folder right after a crashed run (see the module docstring)."""
    if not reports.is_dir():
        return
    for aside in sorted(reports.glob(f"{REPLACED}*")):
        month = aside.name.removeprefix(REPLACED).rsplit("-", 1)[0]
        if not (reports / month).exists():
            os.replace(aside, reports / month)
            log.warning("restored %s, which a crashed run had moved aside", reports / month)
        else:
            shutil.rmtree(aside, ignore_errors=True)
    stale = [*reports.glob(f"{STAGING}*")]
    if work is not None and work.is_dir():
        stale += [p for p in work.glob("staging-*") if p.is_dir()]  # earlier versions' place
    for folder in stale:
        log.warning("removing %s, left by a run that did not finish", folder)
        shutil.rmtree(folder, ignore_errors=True)
    for journal in sorted(reports.glob(f"{JOURNAL}*")):
        _replay(journal, reports, history)
        shutil.rmtree(journal, ignore_errors=True)


def _write_journal(reports: Path, entry: HistoryEntry) -> Path:
    journal = reports / f"{JOURNAL}{entry.month}"
    partial = reports / f"{STAGING}journal-{entry.month}-{os.getpid()}"
    shutil.rmtree(journal, ignore_errors=True)
    shutil.rmtree(partial, ignore_errors=True)
    partial.mkdir(parents=True)
    try:
        write_parquet_atomic(partial / "scores.parquet", entry.scores)
        write_parquet_atomic(partial / "plan.parquet", entry.plan)
        record = {"month": entry.month, "metrics": entry.metrics, "meta": entry.meta}
        write_text_atomic(partial / "entry.json", json.dumps(record, default=str, sort_keys=True))
        os.replace(partial, journal)
    except BaseException:
        shutil.rmtree(partial, ignore_errors=True)
        raise
    return journal


def _replay(journal: Path, reports: Path, history) -> None:
    try:
        record = json.loads((journal / "entry.json").read_text(encoding="utf-8"))
        month = record["month"]
        summary = json.loads((reports / month / "run_summary.json").read_text(encoding="utf-8"))
    except (OSError, ValueError, KeyError) as exc:
        log.warning("dropping %s: its month was not published (%s)", journal, exc)
        return
    if summary.get("data_sha256") != record["meta"].get("data_hash"):
        log.warning("dropping %s: the published %s is from another run", journal, month)
        return
    entry = HistoryEntry(
        month=month,
        scores=pd.read_parquet(journal / "scores.parquet"),
        plan=pd.read_parquet(journal / "plan.parquet"),
        metrics=record["metrics"],
        meta={**record["meta"], "created": pd.Timestamp(record["meta"]["created"])},
    )
    _append(history, entry)
    log.warning("wrote month %s to the history %s: a crashed run had published it", month, history)


def _append(history, entry: HistoryEntry) -> None:
    history.append_run(
        entry.month,
        scores=entry.scores,
        plan=entry.plan,
        metrics=entry.metrics,
        meta=entry.meta,
        force=True,  # the month folder was just published: its rows replace any stored ones
    )


def _rename_into_place(staging: Path, folder: Path, *, force: bool) -> Path | None:
    """Rename ``staging`` to ``folder``; with ``force`` the old folder is moved aside first
    and returned (removed by the caller once the history is written)."""
    folder.parent.mkdir(parents=True, exist_ok=True)
    if not folder.exists():
        os.replace(staging, folder)
        return None
    if not force:
        raise UsageError(f"{folder} appeared while running; not overwriting it")
    aside = folder.parent / f"{REPLACED}{folder.name}-{os.getpid()}"
    shutil.rmtree(aside, ignore_errors=True)
    os.replace(folder, aside)
    try:
        os.replace(staging, folder)
    except BaseException:
        os.replace(aside, folder)
        raise
    return aside


def _undo(folder: Path, aside: Path | None, staging: Path) -> None:
    with contextlib.suppress(OSError):
        os.replace(folder, staging)  # removed with the staging folder by the caller
        if aside is not None:
            os.replace(aside, folder)
