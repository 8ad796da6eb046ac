"""The contract, public and match-free: the JSON Schemas of the messages out and the AsyncAPI document.

* ``GET /api/schema/messages``: every JSON Schema (2020-12) by name;
  ``GET /api/schema/messages/NAME.json`` one of them (what the AsyncAPI document references)
* ``GET /asyncapi.json``: the AsyncAPI 3.0 description of the websocket channels
"""
from __future__ import annotations

import orjson
from fastapi import APIRouter, Request
from fastapi.responses import Response

from pacewire.api.errors import ApiError
from pacewire.config import Server
from pacewire.wire.asyncapi import asyncapi_document
from pacewire.wire.messages import CONTRACT_VERSION
from pacewire.wire.schema import JSON_SCHEMA_DIALECT, json_schemas


def contract_routes(limits: Server) -> APIRouter:
    router = APIRouter()
    schemas = json_schemas()
    index = orjson.dumps({"v": CONTRACT_VERSION, "dialect": JSON_SCHEMA_DIALECT, "schemas": schemas})
    one = {name: orjson.dumps(s) for name, s in schemas.items()}

    @router.get("/api/schema/messages")
    async def get_schemas() -> Response:
        return Response(index, media_type="application/json")

    @router.get("/api/schema/messages/{name}.json")
    async def get_schema(name: str) -> Response:
        if name not in one:
            raise ApiError(404, "unknown_schema", f"no schema {name!r}; there are: {', '.join(one)}")
        return Response(one[name], media_type="application/schema+json")

    @router.get("/asyncapi.json")
    async def get_asyncapi(request: Request) -> Response:
        doc = asyncapi_document(host=request.url.netloc, protocol="wss" if request.url.scheme == "https" else "ws",
                                default_every_s=limits.default_every_s, max_every_s=limits.max_every_s)
        return Response(orjson.dumps(doc), media_type="application/json")

    return router
