"""Pure, vectorised physics functions in canonical units (no Flask, no I/O, no loops over systems)."""
