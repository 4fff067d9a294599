"""Surrogate files: exact round trip, and refusal of tampered, unsafe and foreign files."""

from __future__ import annotations

import hashlib
import io
import json
import zipfile

import numpy as np
import pytest

from surrogates.features import FeatureSpec
from surrogates.store import (
    _array_digest,
    _manifest_digest,
    load_surrogate,
    save_surrogate,
    surrogate_path,
)
from sweeps.errors import ConfigError, StoreError
from tests.surrogates.conftest import ANALYTIC_FEATURES


def _members(path):
    with zipfile.ZipFile(path) as zf:
        return {n: zf.read(n) for n in zf.namelist()}


def _write(path, members):
    with zipfile.ZipFile(path, "w") as zf:
        for n, b in members.items():
            zf.writestr(n, b)


def _resign(members, manifest):
    """What a forger who also recomputes the manifest digest would write."""
    manifest["manifest_sha256"] = _manifest_digest(manifest)
    members["manifest.json"] = json.dumps(manifest).encode()


def _query(table):
    return table[[f.name for f in ANALYTIC_FEATURES]].iloc[:20]


@pytest.fixture()
def saved(tmp_path, analytic_surrogate):
    return save_surrogate(analytic_surrogate, tmp_path / "drawer-tag.surrogate.zip")


def test_round_trip_predicts_identically_and_keeps_metadata(saved, analytic_surrogate,
                                                            analytic_table):
    s = load_surrogate(saved, plan_fingerprint="plan-analytic",
                       features=ANALYTIC_FEATURES, targets=["efficiency"])
    q = _query(analytic_table)
    a = analytic_surrogate.predict_values(q)
    b = s.predict_values(q)
    assert list(a.columns) == list(b.columns)
    np.testing.assert_array_equal(a.to_numpy(), b.to_numpy())
    assert s.target_names == analytic_surrogate.target_names
    assert s.features == analytic_surrogate.features
    assert s.training_sha256 == analytic_surrogate.training_sha256
    for name, tm in s.targets.items():
        ref = analytic_surrogate.targets[name]
        assert (tm.kind, tm.n_train, tm.n_dropped) == (ref.kind, ref.n_train, ref.n_dropped)
        assert tm.cv.r2 == ref.cv.r2 and tm.cv.max_abs_error == ref.cv.max_abs_error
        np.testing.assert_array_equal(tm.X_null, ref.X_null)


def test_file_holds_only_json_and_plain_numeric_arrays(saved):
    members = _members(saved)
    manifest = json.loads(members.pop("manifest.json"))
    assert manifest["format"] == "filamant-surrogate"
    assert {f["name"] for f in manifest["features"]} == {f.name for f in ANALYTIC_FEATURES}
    assert [f["unit"] for f in manifest["features"]] == ["mm", "S/m", "ohm", ""]
    assert set(members) == {d["file"] for d in manifest["arrays"].values()}
    for blob in members.values():
        a = np.load(io.BytesIO(blob), allow_pickle=False)
        assert a.dtype.kind in "fiub"


def test_surrogate_path_sits_beside_the_config(tmp_path):
    cfg = tmp_path / "studies" / "drawer.toml"
    assert surrogate_path(cfg, "drawer-tag") == (tmp_path / "studies" /
                                                  "drawer-tag.surrogate.zip").resolve()


def test_edited_manifest_is_refused(saved):
    m = _members(saved)
    man = json.loads(m["manifest.json"])
    man["targets"]["efficiency"]["cv"]["r2"] = 0.999999
    m["manifest.json"] = json.dumps(man).encode()
    _write(saved, m)
    with pytest.raises(StoreError, match="manifest.json was edited") as e:
        load_surrogate(saved)
    assert str(saved) in str(e.value)


def test_edited_hyperparameter_with_a_forged_manifest_digest_is_refused(saved):
    """Someone who also recomputes the digest: the GP's own consistency check catches it."""
    m = _members(saved)
    man = json.loads(m["manifest.json"])
    man["targets"]["resonance_mhz"]["params"]["constant"] *= 1.5
    _resign(m, man)
    _write(saved, m)
    with pytest.raises(StoreError, match="Cholesky factor does not match"):
        load_surrogate(saved)


def test_swapped_arrays_are_refused(saved):
    m = _members(saved)
    a, b = "arrays/resonance_mhz/alpha.npy", "arrays/efficiency/alpha.npy"
    m[a], m[b] = m[b], m[a]
    _write(saved, m)
    with pytest.raises(StoreError, match="does not match its SHA-256"):
        load_surrogate(saved)


def test_a_flipped_byte_in_an_array_is_refused(saved):
    m = _members(saved)
    key = "arrays/efficiency/L.npy"
    blob = bytearray(m[key])
    blob[-3] ^= 0x01
    m[key] = bytes(blob)
    _write(saved, m)
    with pytest.raises(StoreError, match="efficiency/L does not match its SHA-256"):
        load_surrogate(saved)


class _Payload:
    """Unpickling this would create a marker file: loading must never do so."""

    def __init__(self, marker):
        self.marker = str(marker)

    def __reduce__(self):
        return (open, (self.marker, "w"))


def test_a_pickled_object_array_is_refused_without_running_it(saved, tmp_path):
    marker = tmp_path / "code-ran"
    m = _members(saved)
    man = json.loads(m["manifest.json"])
    evil = np.empty(1, dtype=object)
    evil[0] = _Payload(marker)
    buf = io.BytesIO()
    np.save(buf, evil, allow_pickle=True)
    key = "resonance_mhz/alpha"
    m[f"arrays/{key}.npy"] = buf.getvalue()
    # a forger who also fixes every digest
    man["arrays"][key].update(dtype="|O", shape=[1], sha256=hashlib.sha256(b"x").hexdigest())
    _resign(m, man)
    _write(saved, m)
    with pytest.raises(StoreError, match="not a plain numeric array"):
        load_surrogate(saved)
    assert not marker.exists()


def test_unexpected_members_and_non_archives_are_refused(saved, tmp_path):
    m = _members(saved)
    m["arrays/extra.pkl"] = b"\x80\x04K\x01."
    _write(saved, m)
    with pytest.raises(StoreError, match="unexpected members"):
        load_surrogate(saved)
    junk = tmp_path / "junk.surrogate.zip"
    junk.write_text("not a zip")
    with pytest.raises(StoreError, match="not a zip file"):
        load_surrogate(junk)
    with pytest.raises(StoreError, match="no surrogate file"):
        load_surrogate(tmp_path / "missing.surrogate.zip")


def test_forged_array_with_matching_digest_still_fails_consistency(saved):
    m = _members(saved)
    man = json.loads(m["manifest.json"])
    key = "resonance_mhz/X_train"
    buf = io.BytesIO(m[f"arrays/{key}.npy"])
    x = np.load(buf, allow_pickle=False).copy()
    x[0, 0] += 0.25
    out = io.BytesIO()
    np.lib.format.write_array(out, x, allow_pickle=False)
    m[f"arrays/{key}.npy"] = out.getvalue()
    man["arrays"][key]["sha256"] = _array_digest(x)
    _resign(m, man)
    _write(saved, m)
    with pytest.raises(StoreError, match="inconsistent content"):
        load_surrogate(saved)


def test_a_surrogate_of_another_config_is_refused_by_name(saved):
    with pytest.raises(ConfigError, match="trained on another config") as e:
        load_surrogate(saved, plan_fingerprint="plan-some-other-study")
    assert str(saved) in str(e.value)
    other = list(ANALYTIC_FEATURES)
    other[0] = FeatureSpec("antenna.length_mm", 100.0, 250.0)
    with pytest.raises(ConfigError, match="different ranges"):
        load_surrogate(saved, features=other)
    with pytest.raises(ConfigError, match="features .* vs the config's"):
        load_surrogate(saved, features=other[:2])
    with pytest.raises(ConfigError, match="no model for 'gain_dbi'"):
        load_surrogate(saved, targets=["gain_dbi"])


def test_an_interrupted_save_leaves_the_previous_file_intact(saved, analytic_surrogate,
                                                              monkeypatch):
    before = saved.read_bytes()
    calls = {"n": 0}
    real = zipfile.ZipFile.writestr

    def failing(self, *a, **k):
        calls["n"] += 1
        if calls["n"] == 3:
            raise OSError("disk full")
        return real(self, *a, **k)

    monkeypatch.setattr(zipfile.ZipFile, "writestr", failing)
    with pytest.raises(OSError, match="disk full"):
        save_surrogate(analytic_surrogate, saved)
    monkeypatch.undo()
    assert saved.read_bytes() == before
    assert sorted(p.name for p in saved.parent.iterdir()) == [saved.name]
    load_surrogate(saved)
