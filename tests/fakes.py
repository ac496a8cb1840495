"""Stand-ins shared by tests: sources that misbehave in one particular way."""

from __future__ import annotations

import time

import numpy as np

from logger.sources.base import Chunk


class WrongBaud:
    """A port opened at the wrong baud rate: bytes keep coming, none of them a valid line."""

    name = "/dev/ttyFAKE @ 9600"

    def __init__(self, seed: int = 5) -> None:
        self.rng = np.random.default_rng(seed)

    def open(self) -> None:
        pass

    def read(self) -> Chunk:
        time.sleep(0.02)
        return Chunk(self.rng.integers(0, 256, 200, dtype=np.uint8).tobytes(), time.time())

    def write(self, data: bytes) -> None:
        pass

    def close(self) -> None:
        pass
