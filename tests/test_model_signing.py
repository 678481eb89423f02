"""Model files that cannot run code on load: a signed manifest checked before unpickling.

The planted file is the classic pickle payload (an object whose ``__reduce__`` calls
``exec``), here only creating a marker file. The signature is HMAC-SHA256 (RFC 2104), checked
against Python's own ``hmac`` module below.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import logging
import os
import pickle
import stat

import numpy as np
import pytest

from lifecycle.cli import main
from lifecycle.errors import ModelFileError, UsageError
from lifecycle.models import load_model, save_model
from lifecycle.models._persist import MODEL_FORMAT, SIGNATURE, verify_model_folder
from lifecycle.models._signing import KEY_ENV, KEY_FILE_ENV, sign, signing_key
from lifecycle.panel import build_panel
from tests._builders import make_tables
from tests.test_model_files import ConstantHazards


class Payload:
    """Unpickling this runs ``exec``, which creates the marker file."""

    def __init__(self, marker):
        self.marker = str(marker)

    def __reduce__(self):
        return (exec, (f"open({self.marker!r}, 'w').close()",))


@pytest.fixture
def saved(tmp_path):
    rows = [dict(customer_id=i, start_month="2025-01") for i in range(30)]
    rows[0].update(end_month="2026-03", end_reason="churn")
    model = ConstantHazards().fit(build_panel(make_tables(rows), "2026-10"))
    return save_model(model, tmp_path / "m", training_window=("2025-01", "2026-10"), family="t")


def _plant(folder, marker, *, update_hash=True):
    """Replace the model with the payload; update the manifest's hash as an attacker would."""
    (folder / "model.pickle").write_bytes(pickle.dumps(Payload(marker)))
    if update_hash:
        manifest = json.loads((folder / "manifest.json").read_text())
        digest = hashlib.sha256((folder / "model.pickle").read_bytes()).hexdigest()
        manifest["files"]["model.pickle"] = digest
        (folder / "manifest.json").write_text(json.dumps(manifest, indent=2, sort_keys=True) + "\n")


def _resign(folder):
    (folder / SIGNATURE).write_text(sign((folder / "manifest.json").read_bytes(), signing_key()))


def test_the_signature_is_hmac_sha256_of_the_manifest(saved):
    key = signing_key()
    expected = hmac.new(key, (saved / "manifest.json").read_bytes(), hashlib.sha256).hexdigest()
    assert (saved / SIGNATURE).read_text().strip() == expected  # RFC 2104, Python's hmac
    assert isinstance(load_model(saved, trusted_modules=("tests",)), ConstantHazards)


def test_the_planted_payload_is_live(saved, tmp_path):
    """The control: plain ``pickle.loads`` runs the payload and creates the marker."""
    marker = tmp_path / "ran"
    _plant(saved, marker)
    pickle.loads((saved / "model.pickle").read_bytes())
    assert marker.exists()


@pytest.mark.parametrize(
    "target",
    [(exec, "open({m!r}, 'w').close()"), ("pandas.read_pickle", "{m}"), ("os.system", "touch {m}")],
)
def test_even_a_signed_payload_is_refused_by_the_allow_list(saved, tmp_path, target):
    """Behind the signature, unpickling may construct only what a model holds: a payload
    signed with the right key (as if the key had leaked) is still refused."""
    import importlib

    marker = tmp_path / "ran"
    func, argument = target
    if isinstance(func, str):
        module, name = func.rsplit(".", 1)
        func = getattr(importlib.import_module(module), name)

    class Other:
        def __reduce__(self):
            return (func, (argument.format(m=str(marker)),))

    (saved / "model.pickle").write_bytes(pickle.dumps(Other()))
    manifest = json.loads((saved / "manifest.json").read_text())
    manifest["files"]["model.pickle"] = hashlib.sha256(
        (saved / "model.pickle").read_bytes()
    ).hexdigest()
    (saved / "manifest.json").write_text(json.dumps(manifest, indent=2, sort_keys=True) + "\n")
    _resign(saved)
    with pytest.raises(ModelFileError, match="never holds"):
        load_model(saved, trusted_modules=("tests",))
    assert not marker.exists()


def test_the_allow_list_admits_every_family():
    """Every class the three families and the champion pickle (listed by recording the
    unpickler on fitted models of each family) is allowed."""
    from lifecycle.models._unpickle import allowed

    names = [
        ("lifecycle.models._champion", "ChampionModel"), ("lifecycle.models._cox", "_CauseFit"),
        ("lifecycle.models._forest", "GrownForest"),
        ("lifecycle.models._design", "CovariateDesign"),
        ("lifecycle.models._design", "observed_median"),
        ("sklearn.compose._column_transformer", "ColumnTransformer"),
        ("sklearn.impute._base", "SimpleImputer"), ("sklearn.impute._base", "MissingIndicator"),
        ("sklearn.preprocessing._encoders", "OneHotEncoder"),
        ("lifecycle.evaluation._baseline", "TenureLifeTable"),
        ("lifecycle.models._life_table", "TenureLifeTable"), ("numpy", "dtype"),
        ("numpy._core.multiarray", "_reconstruct"), ("numpy.random._pickle", "__generator_ctor"),
        ("numpy.random.bit_generator", "__pyx_unpickle_SeedSequence"),
        ("pandas._libs.internals", "_unpickle_block"), ("pandas.core.indexes.base", "_new_Index"),
        ("sklearn._loss._loss", "__pyx_unpickle_CyHalfMultinomialLoss"),
        ("sklearn.utils.validation", "check_array"), ("sksurv.tree.tree", "SurvivalTree"),
        ("functools", "partial"),
        ("builtins", "slice"),
    ]  # fmt: skip
    assert [n for n in names if not allowed(*n)] == []
    refused = [("builtins", "eval"), ("os", "system"), ("pandas", "read_pickle"),
               ("numpy", "load"), ("numpy.lib.npyio", "NpzFile"), ("lifecycle.demo", "write_demo"),
               ("builtins", "getattr"), ("subprocess", "Popen")]  # fmt: skip
    assert [n for n in refused if allowed(*n)] == []


@pytest.mark.parametrize("update_hash", [True, False])
def test_a_planted_model_is_refused_by_score_and_never_runs(saved, tmp_path, capsys, update_hash):
    marker = tmp_path / "ran"
    _plant(saved, marker, update_hash=update_hash)
    with pytest.raises(ModelFileError, match="signature" if update_hash else "SHA-256"):
        load_model(saved, trusted_modules=("tests",))
    out = tmp_path / "scores.csv"
    data = tmp_path / "data"
    data.mkdir()
    code = main(
        ["score", str(data), "--model", str(saved), "--as-of", "2026-10", "--out", str(out)]
    )
    err = capsys.readouterr().err
    assert code == 2 and "will not be loaded" in err and "Traceback" not in err
    assert not marker.exists() and not out.exists()


def test_an_unsigned_or_otherwise_signed_manifest_is_refused(saved, monkeypatch):
    (saved / SIGNATURE).unlink()
    with pytest.raises(ModelFileError, match="unsigned"):
        load_model(saved, trusted_modules=("tests",))
    _resign(saved)
    load_model(saved, trusted_modules=("tests",))
    monkeypatch.setenv(KEY_ENV, "x" * 64)  # another key
    with pytest.raises(ModelFileError, match="signature"):
        load_model(saved, trusted_modules=("tests",))


@pytest.mark.parametrize(
    "text, message",
    [
        ("{not json", "not valid JSON"),
        ("[1, 2]", "not an object"),
        ('{"family": "t"}', "lacks the key"),
        (None, "should be a dict"),
        ("\xff", "not valid JSON"),
    ],
)
def test_a_malformed_manifest_is_a_model_file_error_with_exit_2(
    saved, tmp_path, capsys, text, message
):
    path = saved / "manifest.json"
    if text is None:
        manifest = json.loads(path.read_text())
        manifest["files"] = ["model.pickle"]
        text = json.dumps(manifest)
    path.write_bytes(text.encode("latin-1"))
    with pytest.raises(ModelFileError, match=message):
        load_model(saved, trusted_modules=("tests",))
    data = tmp_path / "data"
    data.mkdir()
    out = tmp_path / "s.csv"
    code = main(
        ["score", str(data), "--model", str(saved), "--as-of", "2026-10", "--out", str(out)]
    )
    err = capsys.readouterr().err
    assert code == 2 and message in err and "Traceback" not in err and not out.exists()


@pytest.mark.parametrize(
    "bad", [{"model.pickle": "abc"}, {"../x": "0" * 64, "model.pickle": "0" * 64}]
)
def test_manifest_file_entries_must_be_names_with_hashes(saved, bad):
    manifest = json.loads((saved / "manifest.json").read_text())
    manifest["files"] = bad
    (saved / "manifest.json").write_text(json.dumps(manifest))
    _resign(saved)
    with pytest.raises(ModelFileError, match="plain file names"):
        load_model(saved, trusted_modules=("tests",))


def test_library_versions_major_refused_minor_warned(saved, caplog):
    manifest = json.loads((saved / "manifest.json").read_text())
    numpy_now = np.__version__.split(".")
    manifest["versions"]["numpy"] = f"{int(numpy_now[0]) + 1}.0.0"
    (saved / "manifest.json").write_text(json.dumps(manifest))
    _resign(saved)
    with pytest.raises(ModelFileError, match="saved with numpy"):
        load_model(saved, trusted_modules=("tests",))
    manifest["versions"]["numpy"] = f"{numpy_now[0]}.{int(numpy_now[1]) + 1}.0"
    (saved / "manifest.json").write_text(json.dumps(manifest))
    _resign(saved)
    with caplog.at_level(logging.WARNING):
        verify_model_folder(saved)
    assert "saved with numpy" in caplog.text


def test_the_key_file_is_created_owner_only_and_refused_when_open(tmp_path, monkeypatch):
    path = tmp_path / "cfg" / "lifecycle" / "signing.key"
    monkeypatch.setenv(KEY_FILE_ENV, str(path))
    key = signing_key()
    assert path.is_file() and len(key) == 64
    assert stat.S_IMODE(path.stat().st_mode) == 0o600
    assert stat.S_IMODE(path.parent.stat().st_mode) == 0o700
    assert signing_key() == key  # made once, then read
    os.chmod(path, 0o640)
    with pytest.raises(UsageError, match="chmod 600"):
        signing_key()


def test_the_default_key_file_honours_xdg_config_home(tmp_path, monkeypatch):
    monkeypatch.delenv(KEY_FILE_ENV)
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path / "xdg"))
    signing_key()
    assert (tmp_path / "xdg" / "lifecycle" / "signing.key").is_file()


def test_a_key_inside_the_model_or_data_folder_is_refused(saved, tmp_path, monkeypatch):
    monkeypatch.setenv(KEY_FILE_ENV, str(saved / "signing.key"))
    with pytest.raises(UsageError, match="inside"):
        load_model(saved, trusted_modules=("tests",))
    assert not (saved / "signing.key").exists()
    data = tmp_path / "data"
    data.mkdir()
    monkeypatch.setenv(KEY_FILE_ENV, str(data / "keys" / "signing.key"))
    out = tmp_path / "m2"
    code = main(["fit", str(data), "--as-of", "2026-10", "--family", "cox", "--out", str(out)])
    assert code == 2 and not (data / "keys").exists() and not out.exists()


def test_a_short_key_in_the_environment_is_refused(monkeypatch):
    monkeypatch.setenv(KEY_ENV, "short")
    with pytest.raises(UsageError, match="at least 32"):
        signing_key()


@pytest.mark.parametrize("old", [None, 1])
def test_a_model_in_the_old_file_format_is_refused_with_refit(saved, tmp_path, capsys, old):
    """A manifest of format 1 (written before the format key existed, or saying 1), correctly
    signed, is refused before unpickling; the command line exits 2 and writes nothing."""
    manifest = json.loads((saved / "manifest.json").read_text())
    assert manifest["format"] == MODEL_FORMAT == 2
    if old is None:
        del manifest["format"]
    else:
        manifest["format"] = old
    (saved / "manifest.json").write_text(json.dumps(manifest, indent=2, sort_keys=True) + "\n")
    _resign(saved)
    with pytest.raises(ModelFileError, match=r"model file format 1.*Refit the model"):
        load_model(saved, trusted_modules=("tests",))
    out = tmp_path / "scores.csv"
    args = ["score", str(tmp_path / "no-data"), "--model", str(saved), "--as-of", "2026-10"]
    assert main([*args, "--out", str(out)]) == 2
    assert "format 1" in capsys.readouterr().err and not out.exists()
