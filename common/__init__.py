"""What every layer shares: the user-facing errors and the names of quantities and flag kinds."""
