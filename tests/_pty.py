"""A pseudo-terminal pair for the serial tests."""

from __future__ import annotations

import os
import tty


class Pty:
    """A pseudo-terminal pair; ``path`` is what a serial program opens."""

    def __init__(self) -> None:
        self.master, self.slave = os.openpty()
        tty.setraw(self.slave)
        self.path = os.ttyname(self.slave)

    def write(self, data: bytes) -> None:
        view = memoryview(data)
        while view:
            n = os.write(self.master, view)
            view = view[n:]

    def close(self) -> None:
        for fd in (self.master, self.slave):
            try:
                os.close(fd)
            except OSError:
                pass
