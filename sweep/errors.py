"""The one exception hierarchy of foldsweep.

::

    FoldsweepError            base: the CLI prints its message on one line, exit code 2
    ├── SpecError             a spec file that cannot be read or breaks the spec's rules
    ├── DatasetError          a dataset that is missing, malformed or unusable for the fold scheme
    ├── StoreError            the tracker cannot be opened or written
    │   ├── SchemaVersionError  a store written by another schema version
    │   └── NoStoreYet        no tracker yet at the spec's store (nothing has run)
    ├── SelectionError        a configuration id or filter that matches nothing (reports)
    └── UsageError            a command-line argument no command can use (checked before any work)

Every message names the file, the key and what is allowed, so that a user
can fix the input without reading a traceback.
"""

from __future__ import annotations


class FoldsweepError(Exception):
    """Base class: anything the user can fix by changing their input."""


class SpecError(FoldsweepError):
    """A spec file that cannot be parsed or validated."""


class DatasetError(FoldsweepError):
    """A dataset that is missing, malformed, or unusable."""


class StoreError(FoldsweepError):
    """The tracker cannot be opened, or refuses the operation."""


class SchemaVersionError(StoreError):
    """A store written by another schema version."""


class NoStoreYet(StoreError):
    """The spec's store does not exist yet: the sweep has not run."""


class SelectionError(FoldsweepError):
    """A configuration id or parameter filter that selects nothing."""


class UsageError(FoldsweepError):
    """A command-line argument that no command can use (refused before anything starts)."""
