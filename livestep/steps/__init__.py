"""Samples to measured steps: detection, measurement, the second-order model and its fit, tags.

Pure numpy/scipy: arrays and settings in, frozen dataclasses out; no I/O and no UI imports.
"""
