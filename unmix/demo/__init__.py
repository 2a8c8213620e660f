"""The bundled demo: an invented dryland scenario with known truth, and the full run on it."""
