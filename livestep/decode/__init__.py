"""Decoders: bytes in, timestamped :class:`~livestep.samples.SampleChunk` batches out."""
