"""Commands check their arguments before any work: output paths, horizons, as-of months.

Each refusal is exit code 2 with one message, and the folders involved hold the same files
before and after (nothing written, nothing created).
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from lifecycle.cli import main
from lifecycle.cli._arguments import MAX_HORIZON_MONTHS
from tests._tables_factory import EXTRACT, PREMISE_CRS, valid_frames, write_csv


@pytest.fixture
def data(tmp_path):
    folder = write_csv(tmp_path / "data", valid_frames())
    (folder / "lifecycle.toml").write_text(
        f'[data]\nextract_month = "{EXTRACT}"\npremise_crs = "{PREMISE_CRS}"\n'
    )
    return folder


def _listing(root: Path) -> list[str]:
    return sorted(str(p.relative_to(root)) for p in root.rglob("*"))


def _refused(root: Path, argv: list[str], capsys, *expected: str) -> str:
    """Run ``argv``; check exit 2, one message line holding ``expected``, nothing written."""
    before = _listing(root)
    assert main(argv) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    for text in expected:
        assert text in err[0], err[0]
    assert _listing(root) == before
    return err[0]


def test_out_naming_an_existing_folder_where_a_file_is_expected(data, tmp_path, capsys):
    folder = tmp_path / "results.csv"
    folder.mkdir()
    common = [str(data), "--as-of", "2026-03"]
    _refused(tmp_path, ["backtest", *common, "--out", str(folder)], capsys, "an existing folder")
    _refused(
        tmp_path,
        ["score", *common, "--model", str(tmp_path), "--out", str(folder)],
        capsys,
        "an existing folder",
        "a file is expected",
    )
    parquet = tmp_path / "panel.parquet"
    parquet.mkdir()
    _refused(tmp_path, ["panel", *common, "--out", str(parquet)], capsys, "an existing folder")


def test_out_naming_an_existing_file_where_a_folder_is_expected(data, tmp_path, capsys):
    model = tmp_path / "model"
    model.write_text("not a folder")
    argv = ["fit", str(data), "--as-of", "2026-03", "--family", "cox", "--out", str(model)]
    _refused(tmp_path, argv, capsys, "an existing file", "a folder is expected")
    _refused(
        tmp_path, ["demo", "--customers", "500", "--out", str(model)], capsys, "an existing file"
    )


def test_out_in_a_missing_folder_is_refused_and_the_folder_not_made(data, tmp_path, capsys):
    out = tmp_path / "no-such-folder" / "scores.csv"
    argv = ["score", str(data), "--model", str(tmp_path), "--as-of", "2026-03", "--out", str(out)]
    message = _refused(tmp_path, argv, capsys, "does not exist", "no-such-folder")
    assert "mkdir" in message
    model = tmp_path / "missing" / "model"
    argv = ["fit", str(data), "--as-of", "2026-03", "--family", "cox", "--out", str(model)]
    _refused(tmp_path, argv, capsys, "does not exist")
    assert not (tmp_path / "missing").exists()


def test_out_in_a_folder_that_is_not_writable(data, tmp_path, capsys, monkeypatch):
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o555)
    if os.access(locked, os.W_OK):
        # running as root: permission bits do not bind, so the operating system's answer
        # is replaced by the one a normal user would get for this folder
        real = os.access

        def access(path, mode, *args, **kwargs):
            if Path(path) == locked and mode & os.W_OK:
                return False
            return real(path, mode, *args, **kwargs)

        monkeypatch.setattr(os, "access", access)
    try:
        out = locked / "metrics.csv"
        argv = ["backtest", str(data), "--as-of", "2026-03", "--out", str(out)]
        _refused(tmp_path, argv, capsys, "not writable", str(locked))
    finally:
        locked.chmod(0o755)


@pytest.mark.parametrize(
    ("horizons", "expected"),
    [
        ("3,6,100000", f"100000 is outside 1..{MAX_HORIZON_MONTHS}"),
        ("0,3", "0 is outside"),
        ("-3", "-3 is outside"),
        ("3,6,3", "[3] given more than once"),
        ("three", "whole months from 1 to 120"),
        ("", "whole months"),
    ],
)
def test_bad_horizons_are_refused_before_the_data_is_read(
    data, tmp_path, capsys, horizons, expected
):
    # the data folder is emptied: a refusal that read the data would name its tables instead
    for file in data.iterdir():
        file.unlink()
    out = tmp_path / "out.csv"
    for command in (["score", "--model", str(tmp_path)], ["backtest"]):
        argv = [command[0], str(data), *command[1:], "--as-of", "2026-03"]
        _refused(tmp_path, [*argv, "--horizons", horizons, "--out", str(out)], capsys, expected)


def test_the_horizon_maximum_is_in_the_help_and_the_readme(capsys):
    with pytest.raises(SystemExit):
        main(["score", "--help"])
    assert f"each 1 to {MAX_HORIZON_MONTHS}" in capsys.readouterr().out
    readme = (Path(__file__).parents[1] / "README.md").read_text()
    assert f"{MAX_HORIZON_MONTHS} months" in readme


def test_an_as_of_month_before_the_data_is_refused(data, tmp_path, capsys):
    # the earliest start_month of the factory's customers is 2023-11
    expected = ("--as-of was 1990-01", "the data begins in 2023-11", "from 2023-11 to 2026-06")
    out = tmp_path / "panel.parquet"
    _refused(tmp_path, ["panel", str(data), "--as-of", "1990-01", "--out", str(out)], capsys,
             *expected)  # fmt: skip
    argv = ["fit", str(data), "--as-of", "1990-01", "--family", "cox", "--out", str(tmp_path / "m")]
    _refused(tmp_path, argv, capsys, *expected)
    argv = ["backtest", str(data), "--as-of", "2026-06", "--cutoffs", "2023-10",
            "--out", str(tmp_path / "b.csv")]  # fmt: skip
    _refused(tmp_path, argv, capsys, "--cutoffs was 2023-10", "the data begins in 2023-11")


def test_run_refuses_an_as_of_month_before_the_data(tmp_path, capsys):
    data = write_csv(tmp_path / "data", valid_frames())
    config = data / "lifecycle.toml"
    config.write_text(f'[data]\nextract_month = "{EXTRACT}"\npremise_crs = "{PREMISE_CRS}"\n')
    _refused(
        tmp_path,
        ["run", "--config", str(config), "--as-of", "2001-01"],
        capsys,
        "as_of was 2001-01",
        "the data begins in 2023-11",
    )
