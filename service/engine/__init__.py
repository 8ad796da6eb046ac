"""Pure computation on numpy arrays: no asyncio, no I/O, no JSON."""
