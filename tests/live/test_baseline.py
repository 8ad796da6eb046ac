"""Each player against his own past matches, through the real server: bands in the snapshot equal a
hand computation over the stored figures; too little history says so; the alert rule reads the same bands."""
from __future__ import annotations

import asyncio
import sqlite3
import statistics
import time
from pathlib import Path

import httpx
import numpy as np
import pytest

from pacewire.cli import main as cli
from pacewire.replay.player import replay
from pacewire.replay.synth import write_match
from pacewire.store import history
from tests.support.live_server import LiveServer

MIN_MINUTES = 2.5  # of a 3-minute match: the starters who played it through
CONFIG = f"[history]\nmin_minutes = {MIN_MINUTES}\n"
MATCH = "pw_synth_match"  # the synthetic match's id
RATES = {"m_per_min": ("distance_m",), "hsr_m_per_min": ("hsr_m",), "sprint_m_per_min": ("sprint_m",),
         "accel_decel_per_min": ("accels", "decels")}
SPREADS = 1.5  # history.band_spreads in config/default.toml
# history.min_spread_share in config/default.toml: the spread's floor as a share of the median, per rate
# (high-speed running 16.2 %, sprint distance 30.8 % match-to-match CVs, Gregson et al. 2010; the others from memory)
MIN_SHARE = {"m_per_min": 0.04, "hsr_m_per_min": 0.16, "sprint_m_per_min": 0.31, "accel_decel_per_min": 0.10}


def stored_rates(db: Path, pid: str, keys: list[str]) -> dict[str, dict[str, list[float]]]:
    """By hand from the stored rows: per block (and the match: the sum of its blocks) each rate's value in
    every match, a block's totals / its minutes on the pitch."""
    con = sqlite3.connect(db)
    out: dict[str, dict[str, list[float]]] = {}
    for key in keys:
        rows = con.execute("SELECT scope, figure, value FROM figures WHERE match_key = ? AND player_id = ? "
                           "AND scope LIKE 'block%'", (key, pid)).fetchall()
        blocks: dict[str, dict[str, float]] = {}
        for scope, fig, value in rows:
            blocks.setdefault(scope.removeprefix("block_").replace("_", "-"), {})[fig] = value
        figs_all = ("minutes", *sum(RATES.values(), ()))
        blocks["match"] = {f: sum(b.get(f, 0.0) for b in blocks.values()) for f in figs_all}
        for label, figs in blocks.items():
            for rate, names in RATES.items():
                out.setdefault(label, {}).setdefault(rate, []).append(sum(figs[n] for n in names) / figs["minutes"])
    con.close()
    return out


def band_by_hand(values: list[float], rate: str) -> tuple[float, float, float]:
    """median, and median -/+ 1.5 x 1.4826 x median absolute deviation (robust SD, Rousseeuw & Croux 1993),
    the spread at least the rate's share of the median, the low edge at least 0 (no rate runs below 0)."""
    med = statistics.median(values)
    spread = max(1.4826 * statistics.median([abs(v - med) for v in values]), MIN_SHARE[rate] * med)
    return med, max(0.0, med - SPREADS * spread), med + SPREADS * spread


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    """Three earlier fictional matches (seeds 1-3) in the history, then a new one (seed 5) replayed live."""
    base = tmp_path_factory.mktemp("baseline")
    data = base / "data"
    cfg = base / "club.toml"
    cfg.write_text(CONFIG)
    for seed in (1, 2, 3):
        folder = write_match(base / f"synth{seed}", minutes=3, fps=25, seed=seed, faults=False)
        assert cli(["history", "import", str(folder), "--data", str(data), "--config", str(cfg), "--as", f"s{seed}",
                    "--quiet"]) == 0
    srv = LiveServer(data, config_text=CONFIG).start()
    try:
        folder = write_match(base / "synth5", minutes=3, fps=25, seed=5, faults=False)
        asyncio.run(replay(folder, f"{srv.ws}/ingest/{MATCH}", None))
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:  # full time: the report listed, the match stored
            if any(e["kind"] == "full_time" for e in
                   httpx.get(f"{srv.http}/api/matches/{MATCH}/reports", timeout=10).json().get("reports", [])):
                break
            time.sleep(0.5)
        snap = httpx.get(f"{srv.http}/api/matches/{MATCH}/snapshot", timeout=10).json()
        yield data / "history.sqlite", snap, srv
    finally:
        srv.stop()


def test_bands_equal_a_hand_computation_over_the_stored_figures(served):
    db, snap, _ = served
    with_bands = {pid: p for pid, p in snap["players"].items() if "bands" in p["baseline"]}
    assert len(with_bands) >= 14  # the starters who played the three earlier matches through
    for pid, p in with_bands.items():
        b = p["baseline"]
        assert (b["matches"], b["required"]) == (3, 3)
        keys = [m["match_id"] for m in b["match_ids"]]
        assert sorted(keys) == ["s1", "s2", "s3"]
        rates = stored_rates(db, pid, keys)
        got = {"match": b["bands"]["match"], **b["bands"]["blocks"]}
        assert set(got) == {"match", "0-15", "45-60"}  # a 3-minute match: one block per half
        for scope, per in got.items():
            assert [m["match_id"] for m in b["formed_by"][scope]] == keys
            for rate, band in per.items():
                med, low, high = band_by_hand(rates[scope][rate], rate)
                # the wire carries 0.01 (pacewire.engine.baseline.DIGITS): half a step of slack
                assert band == pytest.approx({"median": med, "low": low, "high": high}, abs=0.005 + 1e-9), (pid, scope)


def test_vs_baseline_is_this_match_over_the_band_median(served):
    db, snap, _ = served
    con = sqlite3.connect(db)
    checked = 0
    for pid, p in snap["players"].items():
        b = p["baseline"]
        if "bands" not in b:
            continue
        vs = b["vs_baseline"]
        assert vs["block_key"] == "45-60"  # the latest block with data: the second half's first
        # this match as the live service stored it at full time (the history's own rows), by hand
        now = stored_rates(db, pid, [MATCH])
        past = stored_rates(db, pid, [m["match_id"] for m in b["match_ids"]])
        for scope, got in (("match", vs["match"]), ("45-60", vs["block"])):
            for rate, band in (b["bands"]["match"] if scope == "match" else b["bands"]["blocks"][scope]).items():
                if band["median"] <= 0:
                    assert rate not in got  # no ratio against a zero median
                    continue
                value = now[scope][rate][0]
                # the history keeps minutes to 0.001 min per block: that much slack on top of the wire's 0.01
                slack = 0.005 + value * 0.001 / 1.0
                med, low, _ = band_by_hand(past[scope][rate], rate)
                assert got[rate]["ratio"] == pytest.approx(value / med, abs=0.005 + slack / med)
                if abs(value - low) > slack:  # clear of the edge by more than the stored rows' rounding
                    assert got[rate]["below"] == (value < low)
                checked += 1
    con.close()
    assert checked >= 28


def test_too_little_history_says_so_and_carries_no_bands(served):
    _, snap, _ = served
    short = {pid: p["baseline"] for pid, p in snap["players"].items() if "bands" not in p["baseline"]}
    assert short  # substitutes who never played the minimum
    for b in short.values():
        assert b == {"matches": b["matches"], "required": 3} and b["matches"] < 3


def test_the_alert_rule_reads_the_same_bands(served):
    db, snap, _ = served
    ids = list(snap["players"])
    b = history.player_baselines(db, ids, 5, MIN_MINUTES, 3, SPREADS, exclude_key=MATCH, min_share=MIN_SHARE)
    rule_view = history.alert_bands(b)
    for pid, p in snap["players"].items():
        if "bands" not in p["baseline"]:
            assert rule_view.get(pid, {}) == {}
            continue
        for label, per in p["baseline"]["bands"]["blocks"].items():
            band = rule_view[pid][f"block_{label.replace('-', '_')}"]["m_per_min"]
            # the rule's limit at its default spreads (1.5) is the published low edge (which stops at 0)
            limit = max(0.0, band.median - SPREADS * band.spread)
            assert limit == pytest.approx(per["m_per_min"]["low"], abs=0.005 + 1e-9)
            assert np.isclose(band.median, per["m_per_min"]["median"], atol=0.005 + 1e-9)


def test_the_report_sets_each_block_against_the_band_and_names_its_matches(served):
    db, snap, srv = served
    import csv
    import io

    for kind, blocks in (("half_time", ["0-15"]), ("full_time", ["0-15", "45-60"])):
        html = httpx.get(f"{srv.http}/api/matches/{MATCH}/reports/{kind}/report.html", timeout=10).text
        assert 'id="against-own"' in html and "Against own recent matches" in html
        assert "Matches behind the bands" in html and "s3, s2, s1" in html
        rows = list(csv.DictReader(io.StringIO(
            httpx.get(f"{srv.http}/api/matches/{MATCH}/reports/{kind}/report.csv", timeout=10).text)))
        by_id = {r["player_id"]: r for r in rows}
        checked = 0
        for pid, p in snap["players"].items():
            b = p["baseline"]
            r = by_id[pid]
            if "bands" not in b:
                if p["minutes"] and kind == "full_time":  # a substitute may not have played the half
                    assert r["own_history_matches"] == str(b["matches"]) and r["own_required_matches"] == "3"
                continue
            for label in blocks:
                scope = label.replace("-", "_")
                # the CSV names the matches behind the block's band, as the snapshot does
                assert r[f"own_{scope}_matches"].split() == [m["match_id"] for m in b["formed_by"][label]]
                band = b["bands"]["blocks"][label]["m_per_min"]
                assert float(r[f"own_{scope}_median_m_per_min"]) == pytest.approx(band["median"], abs=0.011)
                assert float(r[f"own_{scope}_low_m_per_min"]) == pytest.approx(band["low"], abs=0.011)
                value = stored_rates(db, pid, [MATCH])[label]["m_per_min"][0]  # this match's block, by hand
                got = float(r[f"own_{scope}_value_m_per_min"])
                assert got == pytest.approx(value, abs=0.005 + value * 1e-3)
                below = r[f"own_{scope}_m_per_min_below"] == "true"
                assert below == (got < band["low"]) or abs(value - band["low"]) < 0.02  # at the edge: rounding
                checked += 1
        assert checked >= 14 * len(blocks)
        if kind == "half_time":
            assert not any(k.startswith("own_45_60") for k in rows[0])  # the half only
