"""Match history: import, list, baselines over synthetic matches, versioned migrations."""
from __future__ import annotations

import sqlite3
import statistics
from pathlib import Path

import numpy as np
import pytest

from pacewire.analyze import analyze_folder
from pacewire.cli import main as cli
from pacewire.config import load_settings
from pacewire.engine.baseline import make_band
from pacewire.replay.synth import write_match
from pacewire.store import history
from pacewire.store.record import MatchRecord, match_record, robust_band

MIN_MINUTES = 2.5  # of a 3-minute match: the starters who played it through
CONFIG = f"[history]\nmin_minutes = {MIN_MINUTES}\n"


@pytest.fixture(scope="module")
def imported(tmp_path_factory):
    """Three fictional matches (seeds 1-3) imported as replayed live data, and a fourth (seed 4)
    imported as post-match data, which baselines must leave out."""
    base = tmp_path_factory.mktemp("history")
    cfg = base / "club.toml"
    cfg.write_text(CONFIG)
    data = base / "data"
    snaps = {}
    for seed in (1, 2, 3, 4):
        folder = write_match(base / f"synth{seed}", minutes=3, fps=25, seed=seed, faults=False)
        snaps[seed] = analyze_folder(folder).snapshot()
        args = ["history", "import", str(folder), "--data", str(data), "--config", str(cfg), "--as", f"s{seed}",
                "--quiet"]
        if seed == 4:
            args += ["--source", "import", "--allow-post-processed"]
        assert cli(args) == 0
    return data, cfg, snaps


def expected(snaps, pid, get):
    vals = [get(snaps[s]["players"][pid]) for s in (1, 2, 3)]
    return vals


def test_import_and_list(imported, capsys):
    data, cfg, _ = imported
    assert cli(["history", "list", "--data", str(data), "--config", str(cfg)]) == 0
    out = capsys.readouterr().out
    rows = {line.split()[0]: line.split()[1] for line in out.splitlines()[1:] if line.startswith("s")}
    # the synthetic meta says the data was collected live: replayed through the same engine
    assert rows == {"s1": "replay", "s2": "replay", "s3": "replay", "s4": "import"}
    assert "4 matches" in out
    stored = history.matches(data / "history.sqlite")
    assert [m["match_key"] for m in stored] == ["s1", "s2", "s3", "s4"]
    assert all(m["match_id"] == "pw_synth_match" for m in stored)


def test_baselines_are_medians_over_the_live_and_replayed_matches(imported):
    data, _, snaps = imported
    settings = load_settings()
    players = [pid for pid, p in snaps[1]["players"].items()
               if all(snaps[s]["players"][pid]["minutes"] >= MIN_MINUTES for s in (1, 2, 3))]
    assert len(players) >= 14  # starters who played the three matches through
    bands = history.baselines(data / "history.sqlite", players, settings.history.baseline_matches, MIN_MINUTES)
    for pid in players:
        b = bands[pid]
        # match totals: the median of the three matches' snapshot figures (offline s4 left out)
        dist = expected(snaps, pid, lambda p: p["distance_m"])
        assert b["match"]["distance_m"].n == 3
        assert b["match"]["distance_m"].median == pytest.approx(statistics.median(dist), abs=1e-6)
        # spread: 1.4826 x median absolute deviation (Rousseeuw & Croux 1993), computed here with numpy
        mad = float(np.median(np.abs(np.array(dist) - np.median(dist))))
        assert b["match"]["distance_m"].spread == pytest.approx(1.4826 * mad, abs=1e-3)
        # 15-minute block 0-15: the whole (short) first half; per minute on the pitch
        rate = expected(snaps, pid,
                        lambda p: p["windows"]["block_0_15"]["distance_m"] / p["periods"]["first_half"]["minutes"])
        # the snapshot carries minutes to 0.1 min (pacewire.engine.precision): half a step of slack on top
        minutes = min(expected(snaps, pid, lambda p: p["periods"]["first_half"]["minutes"]))
        assert b["block_0_15"]["m_per_min"].median == pytest.approx(statistics.median(rate),
                                                                    rel=5e-3 + 0.05 / minutes)
        hsr = expected(snaps, pid, lambda p: p["windows"]["block_45_60"]["hsr_m"])
        # the history keeps the engine's exact sums; the snapshot's metres are whole (half a metre of slack)
        assert b["block_45_60"]["hsr_m"].median == pytest.approx(statistics.median(hsr), abs=0.56)
        peak = expected(snaps, pid, lambda p: p["windows"]["peak_1min"]["m_per_min"])
        assert b["peak_1min"]["m_per_min"].median == pytest.approx(statistics.median(peak), abs=1e-6)
    # a substitute who never played the minimum has no baseline
    short = [pid for pid, p in snaps[1]["players"].items() if 0 < p["minutes"] < MIN_MINUTES
             and all(snaps[s]["players"][pid]["minutes"] < MIN_MINUTES for s in (1, 2, 3))]
    assert short and not any(pid in bands for pid in history.baselines(data / "history.sqlite", short, 5, MIN_MINUTES))


def _record(key: str, value: float, kickoff: float, source: str = "live", minutes: float = 90.0) -> MatchRecord:
    return MatchRecord(key=key, match_id=key, source=source, kickoff_t=kickoff, match_time_s=5400.0, frames=1,
                       origin="test", teams=(("t1", "Harbour Town", "home", 1),),
                       players=(("p7", "t1", "Test P7", 7, False, minutes, 1.0),),
                       figures=(("p7", "match", "m_per_min", value), ("p7", "block_0_15", "hsr_m", value / 10)))


def test_last_n_matches_minimum_minutes_and_sources(tmp_path):
    db = tmp_path / "h.sqlite"
    for k in range(7):  # values 1..7 in kick-off order, saved out of order
        j = (3 * k) % 7
        history.save(db, _record(f"m{j}", float(j + 1), 1.7e9 + j * 86400))
    history.save(db, _record("short", 100.0, 1.8e9, minutes=30.0))  # latest, but too few minutes
    history.save(db, _record("post", 100.0, 1.8e9, source="import"))  # latest, but post-processed figures
    history.save(db, _record("replayed", 8.0, 1.75e9, source="replay"))  # latest of all that count
    b = history.baselines(db, ["p7"], 5, 60.0)["p7"]
    band = b["match"]["m_per_min"]  # over 4, 5, 6, 7, 8: median 6, MAD 1 (arithmetic)
    assert (band.median, band.n) == (6.0, 5) and band.spread == pytest.approx(1.4826, abs=1e-3)
    assert history.baselines(db, ["p7"], 3, 60.0)["p7"]["match"]["m_per_min"].median == 7.0  # 6, 7, 8
    assert history.baselines(db, ["p7"], 3, 60.0, exclude_key="replayed")["p7"]["match"]["m_per_min"].median == 6.0
    assert history.baselines(db, ["p7"], 5, 20.0)["p7"]["match"]["m_per_min"].median == 7.0  # 'short' counts now
    assert history.baselines(db, ["nobody"], 5, 0.0) == {}
    # saving a key again replaces it
    history.save(db, _record("m0", 50.0, 1.7e9))
    assert len([m for m in history.matches(db) if m["match_key"] == "m0"]) == 1
    assert history.figures(db, "m0", "p7")["match"]["m_per_min"] == 50.0


def test_robust_band():
    # 180, 192, 204: median 192, MAD 12 (arithmetic), spread 1.4826 x 12 (Rousseeuw & Croux 1993)
    med, spread = robust_band([204.0, 180.0, 192.0])
    assert med == 192.0 and spread == pytest.approx(17.7912)
    assert robust_band([5.0]) == (5.0, 0.0)


def test_a_band_is_never_narrower_than_its_floor_nor_below_zero():
    # three matches alike: MAD 0, so the spread is the floor, 4 % of 126.6 = 5.064; edges 126.6 -/+ 1.5 x 5.064
    b = make_band([126.6, 126.6, 126.6], 1.5, 0.04)
    assert (b.spread, b.low, b.high) == pytest.approx((5.064, 119.004, 134.196))
    # sprint m/min 0, 0.5, 1.0: median 0.5, spread 1.4826 x 0.5 = 0.7413 over the 31 % floor; 0.5 - 1.11 < 0
    b = make_band([0.0, 0.5, 1.0], 1.5, 0.31)
    assert b.spread == pytest.approx(0.7413) and b.low == 0.0 and b.high == pytest.approx(1.61195)


def test_records_name_their_source():
    snap = {"match_id": "m", "match_time_s": 0.0, "players": {}, "teams": {}, "health": {}}
    from pacewire.engine.blocks import BlockSeries

    empty = BlockSeries(15, (), (), np.zeros(0), np.zeros(0), np.zeros((0, 0, 11), np.int64), np.zeros((0, 0)), ())
    assert match_record(snap, empty, "live").source == "live"
    with pytest.raises(ValueError, match="live, replay, import"):
        match_record(snap, empty, "post_match")


def test_migrations_are_versioned_and_atomic(tmp_path):
    db = tmp_path / "h.sqlite"
    history.connect(db).close()
    con = sqlite3.connect(db)
    assert con.execute("PRAGMA user_version").fetchone()[0] == history.VERSION
    tables = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    assert {"matches", "teams", "players", "figures"} <= tables
    con.close()
    assert history.migrate(history.connect(db)) == history.VERSION  # opening again changes nothing
    # a database from a newer pacewire is refused, not written
    newer = tmp_path / "newer.sqlite"
    con = sqlite3.connect(newer)
    con.execute(f"PRAGMA user_version = {history.VERSION + 1}")
    con.close()
    with pytest.raises(history.HistoryError, match="newer than this pacewire"):
        history.connect(newer)
    # a migration that fails leaves the database at its old version with none of its tables
    clash = tmp_path / "clash.sqlite"
    con = sqlite3.connect(clash)
    con.execute("CREATE TABLE figures (x INTEGER)")
    con.close()
    with pytest.raises(sqlite3.OperationalError):
        history.connect(clash)
    con = sqlite3.connect(clash)
    assert con.execute("PRAGMA user_version").fetchone()[0] == 0
    assert con.execute("SELECT COUNT(*) FROM sqlite_master WHERE name = 'matches'").fetchone()[0] == 0
    con.close()


def test_import_refuses_what_is_not_a_recording(tmp_path, capsys):
    assert cli(["history", "import", str(tmp_path / "nothing"), "--data", str(tmp_path), "--quiet"]) == 2
    assert "not a folder" in capsys.readouterr().err
    assert cli(["history", "list", "--data", str(tmp_path)]) == 0
    assert "no history yet" in capsys.readouterr().out


def test_post_processed_data_is_refused_unless_asked(tmp_path, capsys):
    """A recording whose meta does not say the tracking was collected live is post-processed: refused,
    with why, and nothing stored; with --allow-post-processed it is stored as 'import', out of baselines."""
    import orjson

    folder = write_match(tmp_path / "post", minutes=2, fps=25, seed=7, faults=False)
    meta = orjson.loads((folder / "meta.json").read_bytes())
    meta["meta"]["tracking"]["collection_timing"] = "post_match"
    (folder / "meta.json").write_bytes(orjson.dumps(meta))
    data = tmp_path / "data"
    args = ["history", "import", str(folder), "--data", str(data), "--quiet"]
    assert cli(args) == 2
    err = capsys.readouterr().err
    assert "post-processed" in err and "drops that are not there" in err and "--allow-post-processed" in err
    assert not (data / "history.sqlite").exists()
    assert cli([*args, "--source", "import"]) == 2  # naming the source is not asking for it
    assert cli([*args, "--allow-post-processed"]) == 0
    assert [m["source"] for m in history.matches(data / "history.sqlite")] == ["import"]
    pids = list(analyze_folder(folder).snapshot()["players"])
    b = history.player_baselines(data / "history.sqlite", pids, 5, 0.0, 1, 1.5)
    assert all(pb.matches == 0 and not pb.bands for pb in b.players.values())  # never in a baseline
    assert cli(["history", "list", "--data", str(data)]) == 0
    assert " import " in capsys.readouterr().out


def test_version_1_databases_migrate_without_losing_rows(tmp_path):
    """A database written before sources were named live | replay | import: every row kept, 'offline'
    renamed 'import', the children (teams, players, figures) still attached."""
    db = tmp_path / "v1.sqlite"
    con = sqlite3.connect(db, isolation_level=None)
    con.executescript(f"BEGIN; {history.MIGRATIONS[0]}; PRAGMA user_version = 1; COMMIT;")
    for key, source in (("a", "live"), ("b", "replay"), ("c", "offline")):
        con.execute("INSERT INTO matches VALUES (?, ?, ?, 1.7e9, 5400, 1, 'test', 0)", (key, key, source))
        con.execute("INSERT INTO teams VALUES (?, 't1', 'Harbour Town', 'home', 1)", (key,))
        con.execute("INSERT INTO players VALUES (?, 'p7', 't1', 'Test P7', 7, 0, 90, 1)", (key,))
        con.execute("INSERT INTO figures VALUES (?, 'p7', 'match', 'm_per_min', 100)", (key,))
    con.close()
    rows = {m["match_key"]: m["source"] for m in history.matches(db)}
    assert rows == {"a": "live", "b": "replay", "c": "import"}
    con = sqlite3.connect(db)
    assert con.execute("PRAGMA user_version").fetchone()[0] == history.VERSION
    counts = [con.execute(f"SELECT COUNT(*) FROM {t}").fetchone()[0] for t in ("teams", "players", "figures")]
    assert counts == [3, 3, 3]
    con.close()
    history.save(db, _record("d", 5.0, 1.8e9, source="import"))  # the new name is accepted ...
    with pytest.raises(sqlite3.IntegrityError):  # ... and the old one no longer
        history.save(db, MatchRecord(**{**_record("e", 5.0, 1.8e9).__dict__, "source": "offline"}))
    history.save(db, _record("a", 6.0, 1.7e9))  # replacing a migrated match deletes its old children
    assert history.figures(db, "a", "p7")["match"]["m_per_min"] == 6.0


def _save_in_process(db: str, key: str) -> None:
    history.save(db, _record(key, 1.0, 1.7e9))


def test_many_reports_stored_at_once_on_a_new_database(tmp_path):
    """Full-time reports of many matches stored at the same moment, on a database nobody has opened:
    threads of this process and other processes (which share no lock) all create the schema at once."""
    import multiprocessing
    import threading
    from concurrent.futures import ProcessPoolExecutor, ThreadPoolExecutor

    n_threads, n_procs, rounds = 16, 4, 8
    barrier = threading.Barrier(n_threads)

    def store(db: Path, k: int) -> None:
        barrier.wait()  # all start together: the first writes race for the schema
        history.connect(db).close()  # as a reader would (baselines, list): no lock of this process
        history.save(db, _record(f"t{k}", float(k), 1.7e9 + k))

    with ProcessPoolExecutor(n_procs, mp_context=multiprocessing.get_context("spawn")) as procs, \
            ThreadPoolExecutor(n_threads) as threads:
        for r in range(rounds):  # a race lost only now and then: several fresh databases
            db = tmp_path / f"h{r}.sqlite"
            done = [procs.submit(_save_in_process, str(db), f"p{k}") for k in range(n_procs)]
            done += [threads.submit(store, db, k) for k in range(n_threads)]
            for f in done:
                f.result()  # "table matches already exists" would be raised here
            keys = {m["match_key"] for m in history.matches(db)}
            assert keys == {f"t{k}" for k in range(n_threads)} | {f"p{k}" for k in range(n_procs)}


def test_schema_is_created_once_and_only_by_the_first(tmp_path):
    db = tmp_path / "h.sqlite"
    history.prepare(db)
    con = sqlite3.connect(db)
    assert con.execute("PRAGMA user_version").fetchone()[0] == history.VERSION
    con.close()
    # a second connection finds the schema and runs no migration (it would fail on the existing tables)
    assert history.migrate(history.connect(db)) == history.VERSION
