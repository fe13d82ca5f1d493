"""How long a chunk of Monte Carlo steps runs and when a task file is rewritten (single tasks and ladders).

Chunking never changes results (the chain's state carries over exactly); it only sets how promptly
signals and deadlines are noticed and how often progress is shown.
"""

from __future__ import annotations

__all__ = ["CHUNK_SECONDS", "MIN_WRITE_INTERVAL", "FIRST_CHUNK", "Pacer", "next_chunk", "write_due"]

CHUNK_SECONDS = 0.3
"""Target wall time of one advance call (signals are handled between chunks)."""
MIN_WRITE_INTERVAL = 1.0
"""At most one task-file write per this many seconds, except the final write."""
FIRST_CHUNK = 16
"""Steps of the first chunk, before any step time is known."""
_MAX_GROWTH = 4  # a chunk is at most this many times longer (in steps) than the previous one


def next_chunk(chunk: int, seconds: float, steps: int) -> int:
    """Steps for the next chunk so that it takes about CHUNK_SECONDS, given that ``steps`` steps took
    ``seconds`` (growth limited to a factor 4 per chunk); unchanged when no step was done."""
    if steps <= 0:
        return chunk
    return max(1, min(chunk * _MAX_GROWTH, int(CHUNK_SECONDS / max(seconds / steps, 1e-9))))


def write_due(since_last: float, pending: bool, interval: float, finished: bool) -> bool:
    """Whether a running task file should be rewritten now: at most once per MIN_WRITE_INTERVAL seconds,
    when a completed bin is pending or the checkpoint interval has passed, never for a finished run (it
    gets its final write anyway)."""
    return since_last >= MIN_WRITE_INTERVAL and (pending or since_last >= interval) and not finished


class Pacer:
    """Chunk length of one running task or ladder: ``chunk`` steps next, ``step_seconds`` the wall time of
    one step (of the whole ladder) as last measured (0 before the first measurement)."""

    def __init__(self) -> None:
        self.chunk = FIRST_CHUNK
        self.step_seconds = 0.0

    def measured(self, seconds: float, steps: int) -> None:
        """``steps`` steps took ``seconds``: update the step time and the next chunk (:func:`next_chunk`)."""
        if steps > 0:
            self.step_seconds = seconds / steps
        self.chunk = next_chunk(self.chunk, seconds, steps)
