"""Link health counters, shared by every decoder and shown by every sink."""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from typing import Any

__all__ = ["LinkCounters"]


@dataclass
class LinkCounters:
    """Running counts for one link: bytes received, good samples, bad lines or frames by
    reason, gaps (sequence gaps, or time gaps over 1.5 x the median period), frames
    known lost from their sequence numbers, decoder
    resynchronisations, reconnects, firmware log lines, notes (``name=value`` lines), device
    restarts (segments), and the partial lines or frames skipped where a live link joined
    or left the stream mid-line (not errors)."""

    bytes: int = 0
    samples: int = 0
    bad: Counter[str] = field(default_factory=Counter)
    gaps: int = 0
    lost: int = 0
    resyncs: int = 0
    reconnects: int = 0
    log_lines: int = 0
    notes: int = 0
    restarts: int = 0
    skipped: int = 0

    def snapshot(self) -> dict[str, Any]:
        """A plain-dict copy, safe to hand to another thread."""
        return {"bytes": self.bytes, "samples": self.samples, "bad": dict(self.bad),
                "bad_total": sum(self.bad.values()), "gaps": self.gaps, "lost": self.lost,
                "resyncs": self.resyncs, "reconnects": self.reconnects,
                "log_lines": self.log_lines, "notes": self.notes, "restarts": self.restarts,
                "skipped": self.skipped}
