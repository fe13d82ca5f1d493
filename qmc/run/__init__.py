"""Running tasks: run planning, the serial runner, pacing of chunks and writes, progress display."""

__all__: list[str] = []
