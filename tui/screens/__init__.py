"""The dashboard's screens: start, intake, flags, selection, response, seasons, and dialogs."""
