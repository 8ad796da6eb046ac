"""The AsyncAPI 3.0 description of pacewire's WebSocket channels (README, "Consuming the stream").

Three channels: ``/live/{match_id}`` (subscribe to a match's messages),
``/ingest/{match_id}`` (a provider pushes CDF frames and reads errors back) and
``/ingest/{match_id}/events`` (the same for CDF event objects).
The document is written from pacewire's side: it *sends* on the live channel
and *receives* frames and events on the ingest channels. Message payloads reference the
JSON Schemas of :mod:`pacewire.wire.schema` (2020-12) by URL, served beside the
document at ``/api/schema/messages/NAME.json``.
"""
from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from pacewire.engine.types import PERIODS
from pacewire.wire.events import BODY_PARTS, EVENT_REQUIRED, X_LIM, Y_LIM
from pacewire.wire.messages import CONTRACT_VERSION
from pacewire.wire.schema import MESSAGES

ASYNCAPI_VERSION = "3.0.0"
SCHEMA_FORMAT = "application/schema+json;version=draft-2020-12"
SCHEMA_BASE = "/api/schema/messages/"  # where the app serves the JSON Schemas

_SUMMARY = {
    "snapshot": "The full state: on connect, and on resync.",
    "delta": "Only the leaves that changed since the previous message to this view.",
    "health": "The feed-health state (or the kinds of its reasons) changed.",
    "period": "A period started or ended.",
    "status": "The match status changed: not_started, live, break, ended.",
    "alert": "A player crossed a configured rule.",
    "report": "A half-time or full-time report is ready.",
    "error": "A bad frame or event (ingest) or a refused subscription (live, then closed with 1008 and a reason).",
}

_MATCH_ID = {"description": "Match id, as set up with PUT /api/matches/{match_id}: 1-64 characters of "
                            "A-Z a-z 0-9 _ . -", "examples": ["m_fict_001"]}

_AUTH_HEADER = {"type": "object", "properties": {
    "Authorization": {"type": "string", "pattern": "^Bearer .+$", "description": "Bearer TOKEN (instead of ?token=)."}}}


def _frame_schema() -> dict[str, Any]:
    """A CDF v0.3.2 tracking frame, the live subset (Anzer et al. 2025, arXiv 2505.15820)."""
    player = {"type": "object", "required": ["id", "x", "y"], "properties": {
        "id": {"type": "string"},
        "x": {"type": ["number", "null"], "description": "m from the centre spot along the touchline; null: not seen"},
        "y": {"type": ["number", "null"], "description": "m from the centre spot along the goal line; null: not seen"}}}
    team = {"type": "object", "required": ["id", "players"], "properties": {
        "id": {"type": "string"}, "players": {"type": "array", "items": player}}}
    return {
        "type": "object",
        "description": "One CDF v0.3.2 tracking frame; the full schema is in the PyPI package "
                       "common-data-format-validator.",
        "required": ["frame_id", "timestamp", "period", "teams"],
        "properties": {
            "frame_id": {"type": "integer",
                         "description": "Increases; repeats and late frames are dropped and counted."},
            "timestamp": {"type": "string", "format": "date-time"},
            "period": {"type": "string", "enum": list(PERIODS)},
            "match": {"type": "object", "properties": {"id": {"type": "string"}}},
            "teams": {"type": "object", "required": ["home", "away"], "properties": {"home": team, "away": team}},
            "ball": {"type": "object", "properties": {
                "x": {"type": ["number", "null"]}, "y": {"type": ["number", "null"]}, "z": {"type": ["number", "null"]},
                "status": {"type": "boolean", "description": "Ball in play"},
                "poss_team_id": {"type": ["string", "null"], "description": "Team in possession"}}},
        },
    }


def _event_schema() -> dict[str, Any]:
    """A CDF v0.3.2 event line (Anzer et al. 2025) as pacewire accepts it: the validator's strictest mode."""
    text, maybe = {"type": "string", "minLength": 1}, {"type": ["string", "null"], "minLength": 1}
    snake = {"type": "string", "pattern": "^[a-z][a-z0-9_]*$"}
    coord = {"x": X_LIM, "y": Y_LIM, "x_end": X_LIM, "y_end": Y_LIM}
    props: dict[str, Any] = {
        "id": {**text, "description": "Key of the event: the same id with other content is a correction "
                                      "(the latest wins), with the same content a duplicate (dropped)."},
        "time": {"type": "string", "format": "date-time", "pattern": "(Z|\\+00:00)$", "description": "UTC"},
        "period": {"type": "string", "enum": list(PERIODS)},
        "type": {**snake, "description": "pass, shot, carry, interception, tackle, clearance, referee, ..."},
        "sub_type": {**snake, "type": ["string", "null"],
                     "description": "kick_off, throw_in, goal_kick, corner_kick, free_kick, foul, ..."},
        "is_successful": {"type": "boolean"}, "outcome_type": snake,
        "player_id": text, "team_id": text, "official_id": text,
        "receiver_id": maybe, "receiver_team_id": maybe,
        "receiver_time": {"type": ["string", "null"], "format": "date-time"},
        "body_part": {"enum": [*BODY_PARTS, None]},
        "related_event_ids": {"type": ["array", "null"], "items": text},
        "match_clock": {"type": "string"}, "metrics": {"type": "object"}, "var": {"type": "object"},
        **{k: {"type": ["number", "null"], "minimum": -lim, "maximum": lim, "description": "m from the centre spot"}
           for k, lim in coord.items()},
    }
    return {
        "type": "object",
        "description": "One CDF v0.3.2 event (the schema event.json of the PyPI package "
                       "common-data-format-validator); a referee event has official_id and no player_id or "
                       "team_id, every other event both. Each refused event is answered with an error message "
                       "naming its code, reason and event_id; nothing of it is applied.",
        "required": ["match", "meta", "event"],
        "additionalProperties": False,
        "properties": {
            "match": {"type": "object", "required": ["id"], "properties": {"id": text}, "additionalProperties": False},
            "meta": {"type": "object", "required": ["is_synced"], "additionalProperties": False,
                     "properties": {"is_synced": {"type": "boolean"}}},
            "event": {"type": "object", "required": list(EVENT_REQUIRED), "properties": props,
                      "additionalProperties": False},
            "tracking": {"type": "object", "additionalProperties": False, "properties": {
                "frame_id": {"type": "integer", "minimum": 0}, "frame_id_end": {"type": "integer", "minimum": 0},
                "player": {"type": "object"}}},
        },
    }


def _message(kind: str, schema_base: str) -> dict[str, Any]:
    return {
        "name": kind,
        "title": kind.capitalize(),
        "summary": _SUMMARY[kind],
        "description": (MESSAGES[kind].__doc__ or "").strip(),
        "contentType": "application/json",
        "payload": {"schemaFormat": SCHEMA_FORMAT, "schema": {"$ref": f"{schema_base}{kind}.json"}},
    }


def _security() -> list[dict[str, str]]:
    """Either scheme: a bearer header or ``?token=``."""
    return [{"$ref": "#/components/securitySchemes/bearer"}, {"$ref": "#/components/securitySchemes/queryToken"}]


def _info() -> dict[str, Any]:
    return {
        "title": "pacewire",
        "version": str(CONTRACT_VERSION),
        "description": (
            "Live exertion figures of football matches, from positional tracking. Written from pacewire's "
            "side: it sends on /live/{match_id} and receives CDF frames on /ingest/{match_id} and CDF events "
            "on /ingest/{match_id}/events. Every "
            f"message carries v (contract major version, now {CONTRACT_VERSION}); within it fields are only "
            "added, never removed or renamed, so ignore fields you do not know. seq increases by one per "
            "message of a subscription stream; on a gap, reconnect with since=LAST_SEQ. Figures are "
            "estimates from positional data; decisions on injury, return-to-play and substitution stay "
            "with qualified staff."),
        "license": {"name": "MIT"},
    }


def _live_query(default_every_s: float, max_every_s: float) -> dict[str, Any]:
    """The query parameters of ``/live/{match_id}``; the cadence bounds come from config ``[server]``."""
    return {
        "type": "object",
        "properties": {
            "every": {"type": "number", "default": default_every_s, "maximum": max_every_s,
                      "description": f"Seconds between deltas: one frame (1/fps) to {max_every_s:g}; "
                                     f"default {default_every_s:g}. Subscribers with the same view and cadence "
                                     "share one stream."},
            "view": {"type": "string", "default": "all", "pattern": r"^(all|team:[^,]+|players:[^,]+(,[^,]+)*)$",
                     "description": "all, team:TEAM_ID (its players and team) or players:ID,ID (those players, "
                                    "both teams)."},
            "since": {"type": "integer", "minimum": 0,
                      "description": "Resume: the last seq received. The stream goes on from seq+1 without an "
                                     "opening snapshot while the server still buffers it, else a snapshot "
                                     "with resync: true."},
            "token": {"type": "string", "description": "View (or ingest) token, when the server requires one."},
        },
    }


def _channels(live_query: dict[str, Any]) -> dict[str, Any]:
    return {
        "live": {
            "address": "/live/{match_id}",
            "title": "Live stream of a match",
            "description": "Opens with a snapshot (or, resuming with since, the messages missed), then deltas "
                           "at the chosen cadence and event messages. A refused subscription gets one error "
                           "message (its param names the bad query parameter), then the socket closes with code "
                           "1008 and the message as the close reason (also without a valid token: reason "
                           "unauthorised).",
            "parameters": {"match_id": _MATCH_ID},
            "messages": {k: {"$ref": f"#/components/messages/{k}"} for k in MESSAGES},
            "bindings": {"ws": {"method": "GET", "query": live_query, "headers": _AUTH_HEADER,
                                "bindingVersion": "0.1.0"}},
        },
        "ingest": {
            "address": "/ingest/{match_id}",
            "title": "Frames in",
            "description": "A provider sends one CDF frame, or a JSON array of frames, per text message. "
                           "Bad frames are answered with an error message each; good ones are recorded and "
                           "applied. Once the match has ended, a message is refused whole with one error "
                           "(code match_ended) until a period_start event reopens it. A provider resuming asks "
                           "GET /api/matches/{match_id}/feed where the stored feed stands. Needs the ingest "
                           "token when the server has one.",
            "parameters": {"match_id": _MATCH_ID},
            "messages": {
                "frame": {"$ref": "#/components/messages/frame"},
                "frames": {"$ref": "#/components/messages/frames"},
                "error": {"$ref": "#/components/messages/error"},
            },
            "bindings": {"ws": {"method": "GET", "headers": _AUTH_HEADER, "query": {
                "type": "object", "properties": {"token": {"type": "string", "description": "Ingest token."}}},
                "bindingVersion": "0.1.0"}},
        },
        "ingest_events": {
            "address": "/ingest/{match_id}/events",
            "title": "CDF events in",
            "description": "A provider sends one CDF event object, or a JSON array of them, per text message "
                           "(pacewire's control events, period_start and the like, are taken here too). Each "
                           "bad event and each duplicate is answered with an error message (code, message, "
                           "event_id); the good ones are recorded in the match's event.jsonl, then applied. "
                           "Needs the ingest token when the server has one.",
            "parameters": {"match_id": _MATCH_ID},
            "messages": {
                "cdf_event": {"$ref": "#/components/messages/cdf_event"},
                "cdf_events": {"$ref": "#/components/messages/cdf_events"},
                "error": {"$ref": "#/components/messages/error"},
            },
            "bindings": {"ws": {"method": "GET", "headers": _AUTH_HEADER, "query": {
                "type": "object", "properties": {"token": {"type": "string", "description": "Ingest token."}}},
                "bindingVersion": "0.1.0"}},
        },
    }


def _operations() -> dict[str, Any]:
    return {
        "sendLive": {
            "action": "send", "channel": {"$ref": "#/channels/live"},
            "summary": "pacewire sends a match's messages to a subscriber.",
            "security": _security(),
            "messages": [{"$ref": f"#/channels/live/messages/{k}"} for k in MESSAGES],
        },
        "receiveFrames": {
            "action": "receive", "channel": {"$ref": "#/channels/ingest"},
            "summary": "pacewire receives tracking frames from a provider.",
            "security": _security(),
            "messages": [{"$ref": "#/channels/ingest/messages/frame"}, {"$ref": "#/channels/ingest/messages/frames"}],
        },
        "sendIngestErrors": {
            "action": "send", "channel": {"$ref": "#/channels/ingest"},
            "summary": "pacewire answers a bad frame with an error message.",
            "messages": [{"$ref": "#/channels/ingest/messages/error"}],
        },
        "receiveEvents": {
            "action": "receive", "channel": {"$ref": "#/channels/ingest_events"},
            "summary": "pacewire receives a match's CDF event stream from a provider.",
            "security": _security(),
            "messages": [{"$ref": "#/channels/ingest_events/messages/cdf_event"},
                         {"$ref": "#/channels/ingest_events/messages/cdf_events"}],
        },
        "sendEventErrors": {
            "action": "send", "channel": {"$ref": "#/channels/ingest_events"},
            "summary": "pacewire answers a bad or repeated event with an error message.",
            "messages": [{"$ref": "#/channels/ingest_events/messages/error"}],
        },
    }


def _components(schema_base: str) -> dict[str, Any]:
    return {
        "messages": {
            **{k: _message(k, schema_base) for k in MESSAGES},
            "frame": {"name": "frame", "title": "Frame", "summary": "One CDF tracking frame.",
                      "contentType": "application/json", "payload": _frame_schema()},
            "frames": {"name": "frames", "title": "Frames", "summary": "A JSON array of CDF tracking frames.",
                       "contentType": "application/json",
                       "payload": {"type": "array", "items": _frame_schema()}},
            "cdf_event": {"name": "cdf_event", "title": "CDF event", "summary": "One CDF event object.",
                          "contentType": "application/json", "payload": _event_schema()},
            "cdf_events": {"name": "cdf_events", "title": "CDF events",
                           "summary": "A JSON array of CDF event objects.", "contentType": "application/json",
                           "payload": {"type": "array", "items": _event_schema()}},
        },
        "securitySchemes": {
            "bearer": {"type": "http", "scheme": "bearer",
                       "description": "Authorization: Bearer TOKEN. The view token reads (live, REST reads, "
                                      "exports); the ingest token writes (ingest, set-up) and reads too. "
                                      "Needed only when the server was started with tokens."},
            "queryToken": {"type": "httpApiKey", "in": "query", "name": "token",
                           "description": "The same token as ?token=TOKEN, for clients that cannot set headers."},
        },
    }


def asyncapi_document(host: str = "localhost:8000", protocol: str = "ws", schema_base: str = SCHEMA_BASE,
                      default_every_s: float = 1.0, max_every_s: float = 60.0) -> dict[str, Any]:
    """The AsyncAPI 3.0 document; ``schema_base`` prefixes the JSON Schema references
    (a URL path on the server, or ``./`` beside ``docs/schema/``)."""
    return {
        "asyncapi": ASYNCAPI_VERSION,
        "id": "urn:pacewire:live",
        "info": _info(),
        "defaultContentType": "application/json",
        "servers": {
            "pacewire": {"host": host, "protocol": protocol, "description": "A pacewire server.",
                         "security": _security()},
        },
        "channels": _channels(_live_query(default_every_s, max_every_s)),
        "operations": _operations(),
        "components": _components(schema_base),
    }


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m pacewire.wire.asyncapi", description="Print the AsyncAPI document.")
    p.add_argument("--host", default="localhost:8000")
    p.add_argument("--schema-base", default=SCHEMA_BASE, help="prefix of the JSON Schema references (e.g. ./)")
    args = p.parse_args(argv)
    sys.stdout.write(json.dumps(asyncapi_document(args.host, schema_base=args.schema_base), indent=2) + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
