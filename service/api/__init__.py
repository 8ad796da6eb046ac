"""The HTTP and WebSocket routes, each written once against a backend.

``backend``   the interfaces the routes need: ingest (set-up, frames, events, heart
              rate), reads (matches, snapshots, live streams), match files (reports,
              budgets, exports)
``errors``    :class:`ApiError` and the one handler that renders ``{"error": ...}``
``auth``      the ingest and view tokens
``requests``  body size limits, JSON bodies, match ids, subscription parameters
``ingest``    ``PUT /api/matches/{id}``, frames, events and heart rate in (HTTP and WS)
``reads``     ``GET /api/matches``, snapshots, report listings, ``WS /live/{id}``
``files``     report files, load budgets, per-player exports
``contract``  the message schemas and the AsyncAPI document
``site``      the bench page, ``/healthz`` and ``/metrics``
``app``       :func:`build_app`: a FastAPI app from the routers a role mounts

Implementations: the single process in :mod:`pacewire.live.backend`; Redis in
:mod:`pacewire.scale.ingest` (ingest role) and :mod:`pacewire.scale.gateway`
(gateway role). Nothing here imports them.
"""
