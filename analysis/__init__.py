"""Pure numerical estimation of selection: no file, database or Textual access."""
