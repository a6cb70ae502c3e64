"""The fieldslope dashboard (Textual) and command line."""
