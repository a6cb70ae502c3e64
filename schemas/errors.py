"""Errors a user may meet. Each carries one plain sentence: what, where, how to fix."""


class FieldslopeError(Exception):
    """Base class: ``str(err)`` is the one-line message shown to the user."""


class ProtocolError(FieldslopeError):
    """The protocol file is unreadable or inconsistent (names file, key and line)."""


class SheetError(FieldslopeError):
    """A batch file cannot be read at all (refused whole)."""


class StoreError(FieldslopeError):
    """The record store is locked, damaged, full or otherwise unusable."""
