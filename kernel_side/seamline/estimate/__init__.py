"""The public estimation API: Design and its fits and diagnostics."""
