"""The history database (SQLite, stdlib sqlite3): versioned migrations, save, list, baselines.

Every function opens its own connection and closes it: the live service
calls them from a worker thread (``asyncio.to_thread``), never on the event
loop. The schema version is SQLite's ``user_version``; each migration runs
in one transaction together with the version bump, and the version is read
again inside that transaction (under SQLite's write lock), so connections
opened at the same moment never both create the tables. The live service
creates the schema once at start (:func:`prepare`); saves to one database
are serialised in this process (one lock per file). A database written by a
newer pacewire is refused.
"""
from __future__ import annotations

import sqlite3
import threading
import time
from collections.abc import Iterable, Mapping
from contextlib import closing
from pathlib import Path
from typing import Any

from pacewire.engine.baseline import STORED, Baselines, PlayerBaseline, block_label, make_band, robust_band
from pacewire.errors import PacewireError
from pacewire.reports.alerts import Band
from pacewire.store.deficit import Deficit
from pacewire.store.record import MatchRecord

BASELINE_SOURCES = ("live", "replay")  # live against live: never post-match figures

MIGRATIONS: tuple[str, ...] = (
    # 1: matches, who played, and figures in long form (player, scope, figure)
    """
    CREATE TABLE matches (
        match_key    TEXT PRIMARY KEY,
        match_id     TEXT NOT NULL,
        source       TEXT NOT NULL CHECK (source IN ('live', 'replay', 'offline')),  -- version 1's names
        kickoff_t    REAL,
        match_time_s REAL NOT NULL,
        frames       INTEGER NOT NULL,
        origin       TEXT NOT NULL,
        stored_at    REAL NOT NULL
    );
    CREATE TABLE teams (
        match_key TEXT NOT NULL REFERENCES matches(match_key) ON DELETE CASCADE,
        team_id   TEXT NOT NULL,
        name      TEXT NOT NULL,
        side      TEXT NOT NULL,
        score     INTEGER,
        PRIMARY KEY (match_key, team_id)
    );
    CREATE TABLE players (
        match_key     TEXT NOT NULL REFERENCES matches(match_key) ON DELETE CASCADE,
        player_id     TEXT NOT NULL,
        team_id       TEXT NOT NULL,
        name          TEXT NOT NULL,
        jersey_number INTEGER NOT NULL,
        is_goalkeeper INTEGER NOT NULL,
        minutes       REAL NOT NULL,
        coverage      REAL NOT NULL,
        PRIMARY KEY (match_key, player_id)
    );
    CREATE TABLE figures (
        match_key TEXT NOT NULL REFERENCES matches(match_key) ON DELETE CASCADE,
        player_id TEXT NOT NULL,
        scope     TEXT NOT NULL,
        figure    TEXT NOT NULL,
        value     REAL NOT NULL,
        PRIMARY KEY (match_key, player_id, scope, figure)
    ) WITHOUT ROWID;
    CREATE INDEX players_by_player ON players (player_id, minutes);
    CREATE INDEX matches_by_time ON matches (source, kickoff_t);
    """,
    # 2: sources named live | replay | import ('offline' becomes 'import': post-processed data); SQLite
    # cannot alter a CHECK, so the table is rebuilt with every row (foreign keys off meanwhile, see migrate)
    """
    CREATE TABLE matches_v2 (
        match_key    TEXT PRIMARY KEY,
        match_id     TEXT NOT NULL,
        source       TEXT NOT NULL CHECK (source IN ('live', 'replay', 'import')),
        kickoff_t    REAL,
        match_time_s REAL NOT NULL,
        frames       INTEGER NOT NULL,
        origin       TEXT NOT NULL,
        stored_at    REAL NOT NULL
    );
    INSERT INTO matches_v2 SELECT match_key, match_id, CASE source WHEN 'offline' THEN 'import' ELSE source END,
        kickoff_t, match_time_s, frames, origin, stored_at FROM matches;
    DROP TABLE matches;
    ALTER TABLE matches_v2 RENAME TO matches;
    CREATE INDEX matches_by_time ON matches (source, kickoff_t);
    """,
    # 3: how far live ran below post-processed figures (pacewire history compare), per comparison and figure
    """
    CREATE TABLE live_deficits (
        compare_key TEXT NOT NULL,
        match_id    TEXT NOT NULL,
        live_origin TEXT NOT NULL,
        post_origin TEXT NOT NULL,
        position    INTEGER NOT NULL,
        figure      TEXT NOT NULL,
        median_pct  REAL NOT NULL,
        spread_pct  REAL NOT NULL,
        players     INTEGER NOT NULL,
        stored_at   REAL NOT NULL,
        PRIMARY KEY (compare_key, figure)
    ) WITHOUT ROWID;
    """,
)
VERSION = len(MIGRATIONS)


class HistoryError(PacewireError, RuntimeError):
    """The history database cannot be opened or is from a newer pacewire."""


def connect(path: str | Path) -> sqlite3.Connection:
    """Open (creating and migrating as needed) the database at ``path``."""
    path = Path(path)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        conn = sqlite3.connect(path, timeout=30.0, isolation_level=None)
    except (OSError, sqlite3.Error) as exc:
        raise HistoryError(f"cannot open the history database {path}: {exc}") from None
    conn.execute("PRAGMA foreign_keys = ON")
    try:
        migrate(conn)
    except BaseException:
        conn.close()
        raise
    return conn


_LOCKS: dict[str, threading.Lock] = {}
_LOCKS_GUARD = threading.Lock()


def _write_lock(path: Path) -> threading.Lock:
    """One lock per database file: this process's writers take turns (SQLite would make them wait anyway)."""
    key = str(path.resolve())
    with _LOCKS_GUARD:
        return _LOCKS.setdefault(key, threading.Lock())


def prepare(path: str | Path) -> None:
    """Create or migrate the schema now (the live service's start), so no save has to."""
    with closing(connect(path)):
        pass


def _version(conn: sqlite3.Connection) -> int:
    v = int(conn.execute("PRAGMA user_version").fetchone()[0])
    if v > VERSION:
        raise HistoryError(f"the history database is at schema version {v}, newer than this pacewire "
                           f"(version {VERSION}): upgrade pacewire or use another database")
    return v


def migrate(conn: sqlite3.Connection) -> int:
    """Bring the schema to :data:`VERSION`; returns the version it started at."""
    start = _version(conn)
    if start == VERSION:
        return start
    # a rebuilt parent table must not cascade deletes into its children; the check below stands in for them
    conn.execute("PRAGMA foreign_keys = OFF")  # outside any transaction, or SQLite ignores it
    try:
        conn.execute("BEGIN IMMEDIATE")  # the write lock first, then the version again: another may have migrated
        try:
            for v in range(_version(conn), VERSION):
                # one transaction: the tables and the version bump land together or not at all
                for stmt in _statements(MIGRATIONS[v]):
                    conn.execute(stmt)
                if conn.execute("PRAGMA foreign_key_check").fetchone() is not None:
                    raise HistoryError(f"migration to version {v + 1} would break a reference: nothing changed")
                conn.execute(f"PRAGMA user_version = {v + 1}")
            conn.execute("COMMIT")
        except BaseException:
            if conn.in_transaction:
                conn.execute("ROLLBACK")
            raise
    finally:
        conn.execute("PRAGMA foreign_keys = ON")
    return start


def _statements(script: str) -> list[str]:
    """A migration's statements (they hold no semicolon inside a literal)."""
    return [s.strip() for s in script.split(";") if s.strip()]


def save(path: str | Path, rec: MatchRecord) -> None:
    """Store a match, replacing any stored under the same key."""
    path = Path(path)
    with _write_lock(path), closing(connect(path)) as conn:
        conn.execute("BEGIN IMMEDIATE")
        try:
            conn.execute("DELETE FROM matches WHERE match_key = ?", (rec.key,))
            conn.execute("INSERT INTO matches VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                         (rec.key, rec.match_id, rec.source, rec.kickoff_t, rec.match_time_s, rec.frames, rec.origin,
                          time.time()))
            conn.executemany("INSERT INTO teams VALUES (?, ?, ?, ?, ?)", [(rec.key, *t) for t in rec.teams])
            conn.executemany("INSERT INTO players VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                             [(rec.key, pid, team, name, jersey, int(gk), minutes, cov)
                              for pid, team, name, jersey, gk, minutes, cov in rec.players])
            conn.executemany("INSERT INTO figures VALUES (?, ?, ?, ?, ?)", [(rec.key, *f) for f in rec.figures])
            conn.execute("COMMIT")
        except BaseException:
            conn.execute("ROLLBACK")
            raise


def matches(path: str | Path) -> list[dict[str, Any]]:
    """Stored matches, oldest kick-off first."""
    with closing(connect(path)) as conn:
        conn.row_factory = sqlite3.Row
        rows = [dict(r) for r in conn.execute(
            "SELECT m.*, (SELECT COUNT(*) FROM players p WHERE p.match_key = m.match_key AND p.minutes > 0) AS played "
            "FROM matches m ORDER BY COALESCE(m.kickoff_t, m.stored_at), m.match_key")]
        for r in rows:
            r["teams"] = [dict(t) for t in conn.execute(
                "SELECT team_id, name, side, score FROM teams WHERE match_key = ? ORDER BY side DESC",
                (r["match_key"],))]
    return rows


def figures(path: str | Path, match_key: str, player_id: str) -> dict[str, dict[str, float]]:
    """One stored player's figures: scope → figure → value."""
    out: dict[str, dict[str, float]] = {}
    with closing(connect(path)) as conn:
        for scope, fig, value in conn.execute(
                "SELECT scope, figure, value FROM figures WHERE match_key = ? AND player_id = ?",
                (match_key, player_id)):
            out.setdefault(scope, {})[fig] = value
    return out


def baselines(path: str | Path, player_ids: Iterable[str], last_n: int, min_minutes: float,
              exclude_key: str | None = None) -> dict[str, dict[str, dict[str, Band]]]:
    """Per player, scope and figure: median and spread over his last ``last_n`` live or
    replayed matches (by kick-off) in which he played at least ``min_minutes``."""
    out: dict[str, dict[str, dict[str, Band]]] = {}
    marks = ",".join("?" * len(BASELINE_SOURCES))
    with closing(connect(path)) as conn:
        for pid in player_ids:
            keys = [k for (k,) in conn.execute(
                f"SELECT m.match_key FROM players p JOIN matches m ON m.match_key = p.match_key "
                f"WHERE p.player_id = ? AND p.minutes >= ? AND m.source IN ({marks}) AND m.match_key IS NOT ? "
                f"ORDER BY COALESCE(m.kickoff_t, m.stored_at) DESC, m.match_key DESC LIMIT ?",
                (pid, min_minutes, *BASELINE_SOURCES, exclude_key, last_n))]
            if not keys:
                continue
            values: dict[tuple[str, str], list[float]] = {}
            for scope, fig, value in conn.execute(
                    f"SELECT scope, figure, value FROM figures WHERE player_id = ? AND match_key IN "
                    f"({','.join('?' * len(keys))})", (pid, *keys)):
                values.setdefault((scope, fig), []).append(value)
            per = out.setdefault(pid, {})
            for (scope, fig), vals in values.items():
                med, spread = robust_band(vals)
                per.setdefault(scope, {})[fig] = Band(round(med, 3), round(spread, 3), len(vals))
    return out


def _qualifying(conn: sqlite3.Connection, pid: str, last_n: int, min_minutes: float,
                exclude_key: str | None) -> list[tuple[str, float | None]]:
    """(match key, kick-off) of a player's last ``last_n`` live or replayed matches with at least
    ``min_minutes`` played, newest first."""
    marks = ",".join("?" * len(BASELINE_SOURCES))
    return [(k, t) for k, t in conn.execute(
        f"SELECT m.match_key, m.kickoff_t FROM players p JOIN matches m ON m.match_key = p.match_key "
        f"WHERE p.player_id = ? AND p.minutes >= ? AND m.source IN ({marks}) AND m.match_key IS NOT ? "
        f"ORDER BY COALESCE(m.kickoff_t, m.stored_at) DESC, m.match_key DESC LIMIT ?",
        (pid, min_minutes, *BASELINE_SOURCES, exclude_key, last_n))]


def _rates(conn: sqlite3.Connection, pid: str, keys: list[str]) -> dict[str, dict[str, dict[str, float]]]:
    """scope ("match" or a block label) -> rate -> match key -> value: each block's stored totals ÷ its
    stored minutes on the pitch; the match's from the sum of its blocks."""
    want = sorted({f for figs in STORED.values() for f in figs} | {"minutes"})
    per: dict[tuple[str, str], dict[str, float]] = {}  # (key, block label) -> figure -> value
    for key, scope, fig, value in conn.execute(
            f"SELECT match_key, scope, figure, value FROM figures WHERE player_id = ? AND scope LIKE 'block!_%' "
            f"ESCAPE '!' AND match_key IN ({','.join('?' * len(keys))}) AND figure IN ({','.join('?' * len(want))})",
            (pid, *keys, *want)):
        per.setdefault((key, block_label(scope)), {})[fig] = value
    match: dict[str, dict[str, float]] = {}
    for (key, _), figs in per.items():
        acc = match.setdefault(key, {})
        for f, v in figs.items():
            acc[f] = acc.get(f, 0.0) + v
    out: dict[str, dict[str, dict[str, float]]] = {}
    scoped = [*per.items(), *(((k, "match"), f) for k, f in match.items())]
    for (key, label), figs in scoped:
        minutes = figs.get("minutes") or 0.0
        if minutes <= 0:
            continue
        for rate, names in STORED.items():
            if all(n in figs for n in names):
                out.setdefault(label, {}).setdefault(rate, {})[key] = sum(figs[n] for n in names) / minutes
    return out


def player_baselines(path: str | Path, player_ids: Iterable[str], last_n: int, min_minutes: float, required: int,
                     spreads: float, block_min: int = 15, exclude_key: str | None = None,
                     min_share: Mapping[str, float] | None = None) -> Baselines:
    """Every player's baseline over his last ``last_n`` live or replayed matches with at least
    ``min_minutes`` played: bands (:func:`pacewire.engine.baseline.make_band`) of each rate for the
    match and each 15-minute block, once ``required`` matches qualify; a block's band needs ``required``
    matches with minutes in that block. One read of the history, at a match's start."""
    players: dict[str, PlayerBaseline] = {}
    if not Path(path).exists():  # no history yet: nobody has a match, and no database is made for it
        return Baselines({pid: PlayerBaseline(0, required) for pid in player_ids}, block_min)
    with closing(connect(path)) as conn:
        for pid in player_ids:
            quals = _qualifying(conn, pid, last_n, min_minutes, exclude_key)
            if len(quals) < required:
                players[pid] = PlayerBaseline(len(quals), required)
                continue
            order = [k for k, _ in quals]
            bands, formed = {}, {}
            for scope, per_rate in _rates(conn, pid, order).items():
                keys = [k for k in order if all(k in v for v in per_rate.values())]
                if len(keys) < required:
                    continue
                bands[scope] = {r: make_band([v[k] for k in keys], spreads, (min_share or {}).get(r, 0.0))
                                for r, v in per_rate.items()}
                formed[scope] = tuple(keys)
            players[pid] = PlayerBaseline(len(quals), required, tuple(quals), bands, formed)
    return Baselines(players, block_min)


def alert_bands(b: Baselines) -> dict[str, dict[str, dict[str, Band]]]:
    """The baseline alert rule's view of the same bands: player -> ``block_0_15`` ... -> rate -> Band."""
    return {pid: {f"block_{scope.replace('-', '_')}": {r: Band(x.median, x.spread, x.n) for r, x in per.items()}
                  for scope, per in pb.bands.items() if scope != "match"}
            for pid, pb in b.players.items()}


def save_deficits(path: str | Path, key: str, match_id: str, live_origin: str, post_origin: str,
                  rows: list[Deficit]) -> None:
    """Store one comparison of a live recording with its post-processed twin, replacing any under ``key``."""
    now = time.time()
    with closing(connect(path)) as conn:
        conn.execute("BEGIN IMMEDIATE")
        try:
            conn.execute("DELETE FROM live_deficits WHERE compare_key = ?", (key,))
            conn.executemany("INSERT INTO live_deficits VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                             [(key, match_id, live_origin, post_origin, i, d.figure, d.median_pct, d.spread_pct,
                               d.players, now) for i, d in enumerate(rows)])
            conn.execute("COMMIT")
        except BaseException:
            conn.execute("ROLLBACK")
            raise


def stored_deficits(path: str | Path, key: str) -> list[Deficit]:
    """One stored comparison, in the order it was stored."""
    with closing(connect(path)) as conn:
        return [Deficit(f, m, s, n) for f, m, s, n in conn.execute(
            "SELECT figure, median_pct, spread_pct, players FROM live_deficits WHERE compare_key = ? "
            "ORDER BY position", (key,))]
