"""Measured steps to judgements: quantities, tolerance profiles, verdicts, design guidance,
statistics and comparison. Pure Python and numpy; no I/O beyond reading a profile file."""
