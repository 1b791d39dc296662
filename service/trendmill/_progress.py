"""A one-line progress bar for terminals: partitions, rows, rate, ETA. Silent elsewhere."""

from __future__ import annotations

import sys
import time

__all__ = ["ProgressBar", "human_count"]


def human_count(n: float) -> str:
    for unit, size in (("G", 1e9), ("M", 1e6), ("k", 1e3)):
        if abs(n) >= size:
            return f"{n / size:.1f}{unit}"
    return f"{n:.0f}"


class ProgressBar:
    """Redraws one stderr line at most 10 times a second; does nothing when not a TTY."""

    def __init__(self, *, stream=None, enabled: bool | None = None, width: int = 24) -> None:
        self.stream = stream or sys.stderr
        self.enabled = self.stream.isatty() if enabled is None else enabled
        self.width = width
        self.start = time.monotonic()
        self._last = 0.0
        self._drawn = False

    def update(self, partitions_done: int, partitions_total: int, rows: int, nbytes: int = 0,
               rows_total: int | None = None) -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        if now - self._last < 0.1 and partitions_done < partitions_total:
            return
        self._last = now
        elapsed = max(now - self.start, 1e-9)
        frac = partitions_done / partitions_total if partitions_total else 1.0
        if rows_total:
            frac = min(rows / rows_total, 1.0)
        filled = int(round(frac * self.width))
        rate = rows / elapsed
        eta = (elapsed / frac - elapsed) if frac > 0 else float("nan")
        eta_text = f"{eta:5.1f}s" if eta == eta else "   ?"
        line = (f"\r[{'#' * filled}{'.' * (self.width - filled)}] {partitions_done}/{partitions_total} "
                f"partitions  {human_count(rows)} rows  {human_count(rate)} rows/s  ETA {eta_text}")
        self.stream.write(line)
        self.stream.flush()
        self._drawn = True

    def close(self) -> None:
        if self._drawn:
            self.stream.write("\n")
            self.stream.flush()
            self._drawn = False
