"""The sample batch that flows from sources and decoders into the analysis."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

__all__ = ["SampleChunk"]


@dataclass(frozen=True, kw_only=True, eq=False)
class SampleChunk:
    """Consecutive samples: ``t`` in seconds (strictly increasing), ``feedback`` and
    ``setpoint`` in the loop's units (``setpoint`` is ``None`` when the stream has
    none), ``extras`` any further channels by name. ``segment`` counts device restarts:
    a chunk never spans two segments, and steps never cross from one to the next."""

    t: NDArray[np.float64]
    feedback: NDArray[np.float64]
    setpoint: NDArray[np.float64] | None = None
    extras: dict[str, NDArray[np.float64]] = field(default_factory=dict)
    segment: int = 0

    def __len__(self) -> int:
        return int(self.t.size)
