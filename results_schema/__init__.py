"""The tracker's tables (``schema.sql``) and the results export's Arrow schema
(``results.arrow.json``), versioned together by ``VERSION``."""

from __future__ import annotations

from importlib import resources

#: the schema version this foldsweep reads and writes
SCHEMA_VERSION = int(resources.files(__name__).joinpath("VERSION").read_text().strip())


def read(name: str) -> str:
    """The text of one schema file shipped in this package."""
    return resources.files(__name__).joinpath(name).read_text()
