"""Finished matches on disk: what a restart indexes instead of rebuilding.

A match that has ended (its reports built, ``[archive] grace_s`` after its
end) is archived: ``final.json`` beside its recording holds a format
version, the entry the match list shows, the final snapshot body, the match
events, the budgets, where the feed stands, and the size of every recorded file it covers;
``export.csv`` holds the final per-player export. Its engine state then
leaves memory. At start a folder whose ``final.json`` still covers its files
(nothing was recorded since) is only indexed: no engine work, no report
drawn again; reads come from these files (the snapshot is read from disk at
each request, never kept). Anything else is rebuilt from its recording.
"""
from __future__ import annotations

import logging
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import orjson

from pacewire.config import Settings
from pacewire.engine.types import Roster
from pacewire.live.recorder import write_json_atomic
from pacewire.reports.builder import list_reports
from pacewire.reports.export import export_csv, export_table
from pacewire.wire.cdf import gnss_tolerances, parse_setup
from pacewire.wire.recording import EVENT_FILE

log = logging.getLogger("pacewire.archive")

FORMAT = 1  # the layout of final.json; another version is rebuilt from the recording
FINAL = "final.json"
EXPORT = "export.csv"
RECORDED = ("tracking.jsonl", "hr.jsonl", EVENT_FILE, "events.jsonl")  # what the archive must cover


def recorded_sizes(folder: Path) -> dict[str, int]:
    """Bytes of each recorded file (absent: 0): an archive holds only while these are unchanged."""
    out = {}
    for name in RECORDED:
        try:
            out[name] = (folder / name).stat().st_size
        except FileNotFoundError:
            out[name] = 0
    return out


def report_entries(match_id: str, root: Path) -> list[dict[str, Any]]:
    """The report listing of a match (its reports folder), with each file's URL."""
    def url(kind: str, name: str) -> str:
        return f"/api/matches/{match_id}/reports/{kind}/{name}"

    return [{**e, "url": url(e["kind"], "report.html"), "csv": url(e["kind"], "report.csv"),
             "json": url(e["kind"], "snapshot.json"), "alerts_csv": url(e["kind"], "alerts.csv")}
            for e in list_reports(root)]


@dataclass(frozen=True)
class Archived:
    """A finished match served from its folder."""

    match_id: str
    folder: Path
    summary: dict[str, Any]

    def _final(self) -> dict[str, Any]:
        body: dict[str, Any] = orjson.loads((self.folder / FINAL).read_bytes())
        return body

    def snapshot(self) -> dict[str, Any]:
        """The final snapshot body (read from disk)."""
        snap: dict[str, Any] = self._final()["snapshot"]
        return snap

    def events(self) -> list[dict[str, Any]]:
        events: list[dict[str, Any]] = self._final()["events"]
        return events

    def position(self) -> dict[str, Any]:
        """Where the stored feed stands (``GET /api/matches/{id}/feed``), as it was archived."""
        pos: dict[str, Any] = self._final()["position"]
        return pos

    def budgets(self) -> dict[str, Any]:
        budgets: dict[str, Any] = self._final()["budgets"]
        return budgets

    def roster(self, settings: Settings) -> Roster:
        meta = orjson.loads((self.folder / "meta.json").read_bytes())
        sheet = orjson.loads((self.folder / "match.json").read_bytes())
        return parse_setup(meta, sheet, self.match_id, gnss_tolerances(settings))

    def listing(self) -> list[dict[str, Any]]:
        return report_entries(self.match_id, self.folder / "reports")


def write_archive(folder: Path, match_id: str, summary: dict[str, Any], snapshot: dict[str, Any],
                  events: list[dict[str, Any]], budgets: dict[str, Any], position: dict[str, Any]) -> Archived:
    """Write ``final.json`` and ``export.csv`` (each atomically) once the recorders are stopped."""
    columns, rows = export_table(snapshot)
    tmp = folder / (EXPORT + ".tmp")
    tmp.write_text(export_csv(columns, rows), encoding="utf-8")
    tmp.replace(folder / EXPORT)
    summary = {**summary, "archived": True}
    write_json_atomic(folder / FINAL, {"format": FORMAT, "summary": summary, "covers": recorded_sizes(folder),
                                       "snapshot": snapshot, "events": events, "budgets": budgets,
                                       "position": position})
    return Archived(match_id, folder, summary)


def read_archive(folder: Path) -> Archived | None:
    """The archive of ``folder`` if it is there, of this format and still covers the recording."""
    path = folder / FINAL
    if not path.exists():
        return None
    try:
        body = orjson.loads(path.read_bytes())
        if body.get("format") != FORMAT:
            log.warning("%s: archive format %r is not %d: rebuilding from the recording", folder.name,
                        body.get("format"), FORMAT)
            return None
        if body.get("covers") != recorded_sizes(folder):
            log.info("%s: recorded since it was archived: rebuilding from the recording", folder.name)
            return None
        return Archived(folder.name, folder, body["summary"])
    except (OSError, orjson.JSONDecodeError, KeyError, TypeError, AttributeError) as exc:
        log.warning("%s: unreadable %s (%s): rebuilding from the recording", folder.name, FINAL, exc)
        return None
