"""The invented demo study: protocol, batch files and true values, read with importlib.resources."""
