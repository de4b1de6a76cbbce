"""Sinks: where decoded samples and step results go (recordings, the console, the UI)."""
