"""A one-line progress bar on stderr that stays quiet when stderr is not a terminal."""

from __future__ import annotations

import sys
import time


class Progress:
    """Progress toward ``total`` (in any unit) with the elapsed time and an ETA."""

    def __init__(self, total: float, unit: str, enabled: bool | None = None,
                 every: float = 0.25) -> None:
        self.total, self.unit, self.every = float(total), unit, every
        self.enabled = sys.stderr.isatty() if enabled is None else enabled
        self.start = self._last = time.monotonic()
        self.extra = ""

    def update(self, done: float, extra: str = "") -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        if now - self._last < self.every and done < self.total:
            return
        self._last = now
        frac = min(1.0, done / self.total) if self.total > 0 else 1.0
        elapsed = now - self.start
        eta = elapsed * (1 - frac) / frac if frac > 0 else float("nan")
        width = 28
        fill = int(frac * width)
        text = (f"\r[{'#' * fill}{'.' * (width - fill)}] {100 * frac:5.1f}%  "
                f"{done:.4g}/{self.total:.4g} {self.unit}  {_clock(elapsed)} elapsed, "
                f"ETA {_clock(eta)}{'  ' + extra if extra else ''}")
        sys.stderr.write(text.ljust(100))
        sys.stderr.flush()

    def close(self) -> None:
        if self.enabled:
            self._last = 0.0
            self.update(self.total)
            sys.stderr.write("\n")
            sys.stderr.flush()


def _clock(seconds: float) -> str:
    if seconds != seconds or seconds == float("inf"):
        return "--:--"
    m, s = divmod(int(seconds + 0.5), 60)
    h, m = divmod(m, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m:02d}:{s:02d}"
