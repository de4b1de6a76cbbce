"""Decoders: bytes in, timestamped :class:`~livestep.steps.samples.SampleChunk` batches out."""
