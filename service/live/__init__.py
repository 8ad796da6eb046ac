"""The asyncio shell: ingest, broadcaster, recorder and the FastAPI app."""
