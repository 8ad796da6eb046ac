"""Redis-backed roles for multi-process deployments (README, "Running at league scale").

``ingest`` appends frames to a Redis Stream per match, ``aggregator`` claims
matches with a lease and steps the engine, ``gateway`` fans the aggregator's
messages out to websockets, ``recorder`` writes the CDF folder from the
stream. redis-py is an optional dependency: ``pip install 'pacewire[scale]'``.
"""
