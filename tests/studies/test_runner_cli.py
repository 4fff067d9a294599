"""``filamant run``, ``status`` and ``export`` end to end on a real SQLite store and a real dask
LocalCluster, and the refusals that must leave the store untouched.

External checks: the exported Touchstone files are read back with scikit-rf and compared with
``S11 = (Z - Z0)/(Z + Z0)`` of the stored impedances (Pozar, *Microwave Engineering*, 4th ed.,
eq. 2.35 — from memory); the Parquet file is read back with pyarrow through pandas.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import skrf

from studies.api import load_context, run_study, table_of
from studies.cli import main
from studies.lease import Lease
from studies.store import Store
from tests.studies.studies_store_support import SPACE, write_study

# gaps up to 400 mm on a 130-170 mm dipole: the widest do not fit, those points must fail
GAP_SPACE = SPACE + "feed.gap_mm = {min = 0.5, max = 400, log = true}\n"


def _db(cfg: Path) -> Path:
    return cfg.parent / f"{cfg.stem}.db"


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _cli(capsys, *argv: str) -> tuple[int, str, str]:
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_run_status_export_end_to_end(tmp_path, capsys):
    cfg = write_study(tmp_path, points=16, workers=2, space=GAP_SPACE)
    code, out, err = _cli(capsys, "run", cfg, "--json", "--no-progress")
    assert code == 0, err
    summary = json.loads(out)
    assert f"store sqlite:///{_db(cfg)}" in err and "16 of 16 point(s)" in err
    assert summary["total"] == 16 and summary["planned"] == 0
    assert summary["done"] + summary["failed"] == 16
    assert 1 <= summary["failed"] < 16  # the gaps that do not fit

    code, out, _ = _cli(capsys, "status", cfg, "--json")
    st = json.loads(out)
    assert code == 0
    assert {k: st[k] for k in ("planned", "done", "failed", "total")} == {
        "planned": 0, "done": summary["done"], "failed": summary["failed"], "total": 16}
    assert st["running"] is None and st["config_matches"] is True and st["exists"]
    assert any("gap" in r for r in st["failure_reasons"]), st["failure_reasons"]

    # a second run evaluates nothing and does not retry the failed points
    code, out, _ = _cli(capsys, "run", cfg, "--json")
    again = json.loads(out)
    assert again["evaluated"] == 0 and again["failed"] == summary["failed"]

    csv, parquet, tsdir = tmp_path / "t.csv", tmp_path / "t.parquet", tmp_path / "s1p"
    code, out, _ = _cli(capsys, "export", cfg, "--table", csv, "--touchstone", tsdir)
    assert code == 0 and "wrote 16 row(s)" in out
    assert _cli(capsys, "export", cfg, "--table", parquet)[0] == 0
    df = pd.read_csv(csv)
    pq = pd.read_parquet(parquet)
    params = [c for c in df.columns if "." in c]
    assert params == ["antenna.conductivity_s_per_m", "antenna.length_mm", "antenna.width_mm",
                      "feed.gap_mm"]  # the canonical dotted names, in the study's order
    assert list(df.columns[:1]) == ["point_id"] and df["point_id"].is_unique and len(df) == 16
    np.testing.assert_array_equal(df["resonance_mhz"].to_numpy(),
                                  pq["resonance_mhz"].to_numpy())
    assert df["antenna.length_mm"].between(130, 170).all()
    failed = df[df["status"] == "failed"]
    assert failed["failure_reason"].str.len().gt(0).all()
    assert failed["s11_db"].isna().all()
    done = df[df["status"] == "done"]
    assert done["s11_db"].notna().all() and done["zin_re_ohm"].gt(0).all()

    only = table_of(load_context(cfg), done_only=True)
    assert list(only["point_id"]) == list(done["point_id"])

    files = sorted(tsdir.glob("*.s1p"))
    assert len(files) == summary["done"]
    ctx = load_context(cfg)
    with Store(ctx.store_url, create=False) as store:
        stored = {pid: (f, z) for pid, f, z, _ in store.responses(ctx.name)}
    for f in files:
        net = skrf.Network(str(f))
        fz, z = stored[f.stem]
        np.testing.assert_allclose(net.f, fz, rtol=1e-12)
        s11 = (z[:, 0, 0] - 50.0) / (z[:, 0, 0] + 50.0)
        np.testing.assert_allclose(net.s[:, 0, 0], s11, rtol=1e-9, atol=1e-12)
        text = f.read_text()
        row = done[done["point_id"] == f.stem].iloc[0]
        assert f"point_id = {f.stem}" in text
        assert f"antenna.length_mm = {float(row['antenna.length_mm'])!r}" in text


@pytest.fixture(scope="module")
def ran(tmp_path_factory):
    """A small study that has been run once (its config and db)."""
    tmp = tmp_path_factory.mktemp("ran")
    cfg = write_study(tmp, points=4, workers=1)
    s = run_study(cfg, progress=False)
    assert s.done == 4
    return cfg


def _untouched(cfg: Path):
    db = _db(cfg)
    before = _sha(db)
    with Store(f"sqlite:///{db}", create=False) as store:
        counts = store.counts("drawer")
    return lambda: (_sha(db) == before and
                    Store(f"sqlite:///{db}", create=False).counts("drawer") == counts)


def test_changed_config_refused_store_untouched(ran, capsys):
    same = _untouched(ran)
    code, out, err = _cli(capsys, "run", ran, "--set", "antenna.thickness_mm=0.5")
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and err.startswith("filamant: error: ")
    assert "antenna.thickness_mm: 0.4 -> 0.5" in err and "--fresh" in err
    code, _, err = _cli(capsys, "run", ran, "--set", "sampler.points=8")
    assert code == 2 and "sampler.points: 4 -> 8" in err
    # the reader changes read_range_m: refused too, naming the key
    code, _, err = _cli(capsys, "run", ran, "--set", "reader.tx_power_dbm=27")
    assert code == 2 and "reader.tx_power_dbm" in err and "cluster" not in err
    assert same()


def test_neutral_settings_accepted(ran, capsys):
    """More workers or a new surrogate target change no result: the stored study is reused."""
    code, out, err = _cli(capsys, "run", ran, "--json", "--set", "cluster.workers=2")
    assert code == 0, err
    s = json.loads(out)
    assert (s["evaluated"], s["done"], s["created"]) == (0, 4, False)
    code, out, _ = _cli(capsys, "status", ran, "--json", "--set", "cluster.workers=2")
    assert json.loads(out)["config_matches"] is True


@pytest.mark.parametrize("argv, words", [
    (["--set", "antenna.lenght_mm=150"], ["antenna.lenght_mm", "length_mm"]),  # unknown key
    (["--set", "band.points=1"], ["band.points"]),  # bad range
    (["--set", 'antenna.length_mm="long"'], ["antenna.length_mm"]),  # wrong type
    (["--set", "space.length_mm={min = 170, max = 130}"], ["length_mm"]),  # empty range
])
def test_bad_config_one_line_exit_2_store_untouched(ran, capsys, argv, words):
    same = _untouched(ran)
    code, out, err = _cli(capsys, "run", ran, *argv)
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and err.startswith("filamant: error: "), err
    for w in words:
        assert w in err, err
    assert same()


def test_missing_section_refused_store_untouched(ran, capsys):
    same = _untouched(ran)
    bad = ran.parent / "drawer_noband.toml"
    text = ran.read_text()
    start = text.index("[band]")
    bad.write_text(text[:start] + text[text.index("[space]"):])
    code, out, err = _cli(capsys, "run", bad)
    assert code == 2 and err.count("\n") == 1 and "band" in err, err
    assert same()


def test_concurrent_run_refused(ran, capsys):
    """A live run (this very process holds the lease) refuses a second one."""
    same = _untouched(ran)
    ctx = load_context(ran)
    with Store(ctx.store_url) as store, Lease.acquire(store, ctx.name):
        code, out, err = _cli(capsys, "run", ran)
        assert code == 2 and "being run right now" in err and err.count("\n") == 1
        code, out, _ = _cli(capsys, "status", ran, "--json")
        assert json.loads(out)["running"]["command"] == "run"
    assert same()
    assert _cli(capsys, "run", ran)[0] == 0  # released: fine again
    with Store(ctx.store_url, create=False) as store:
        assert store.counts(ctx.name)["done"] == 4


@pytest.mark.slow
def test_fresh_starts_over(tmp_path, capsys):
    cfg = write_study(tmp_path, points=2, workers=1)
    assert run_study(cfg, progress=False).done == 2
    code, out, err = _cli(capsys, "run", cfg, "--fresh", "--set", "sampler.points=3",
                          "--json")
    s = json.loads(out)
    assert code == 0 and s["created"] and s["deleted"] == 2 and s["done"] == 3
    assert "deleted the 2 stored point(s)" in err


def test_status_and_export_never_create_a_store(tmp_path, capsys):
    cfg = write_study(tmp_path, points=2)
    code, out, _ = _cli(capsys, "status", cfg, "--json")
    st = json.loads(out)
    assert code == 0 and st["exists"] is False and st["total"] == 0
    code, _, err = _cli(capsys, "export", cfg, "--table", tmp_path / "x.csv")
    assert code == 2 and "no store yet" in err
    code, _, err = _cli(capsys, "export", cfg)
    assert code == 2 and "--table" in err
    assert not _db(cfg).exists() and not (tmp_path / "x.csv").exists()
