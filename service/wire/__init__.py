"""Everything on the wire: pydantic models and orjson codecs."""
