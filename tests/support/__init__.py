"""Helpers the tests and benchmarks share: CDF objects, trajectories, real servers, websocket helpers,
the bench page's feed. Imported as ``tests.support.<module>`` from the repository root."""
