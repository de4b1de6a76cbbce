"""The virtual bench: a simulated drive controller on the other end of a serial link."""
