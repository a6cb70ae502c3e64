"""Study protocol, batch reading and validation, flags and the SQLite record store.

Nothing here imports Textual or the estimators: data flows
file -> schemas -> store -> analysis -> tui.
"""
