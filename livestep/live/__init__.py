"""The live pipeline: the session (bytes to sinks), the threaded watch, running it on the
console, and step plans with their runner."""
