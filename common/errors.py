"""Every error a user may meet, in one place. Each carries one plain sentence: what, where, how to fix.

``str(err)`` is the whole message; the command line prints it on one line and the
dashboard shows it as text. Both ``schemas`` and ``analysis`` raise these, so they
live below both layers.
"""


class FieldslopeError(Exception):
    """Base class: ``str(err)`` is the one-line message shown to the user."""


class ProtocolError(FieldslopeError):
    """The protocol file is unreadable or inconsistent (names file, key and line)."""


class SheetError(FieldslopeError):
    """A batch file cannot be read at all (refused whole)."""


class StoreError(FieldslopeError):
    """The record store is locked, damaged, full or otherwise unusable."""


class BusyError(StoreError):
    """Another program holds the record store's write lock (SQLite reported it busy or locked)."""


class RecordError(FieldslopeError):
    """A request the record cannot satisfy: an unknown flag, an unusable value, a missing reason."""


class StudyError(FieldslopeError):
    """The study folder is missing, incomplete or already taken."""


class PedigreeError(FieldslopeError):
    """The parent records cannot form a pedigree (an individual is its own ancestor)."""


class EstimationError(FieldslopeError):
    """The data frame does not match the design, or a planning input is out of range."""


class DemoError(FieldslopeError):
    """The demo cannot start (its files are missing, or the folder holds another study)."""
