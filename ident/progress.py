"""A minimal progress bar on stderr for long CLI steps (silent when not wanted)."""

from __future__ import annotations

import sys
import time


class Progress:
    """Text progress bar: ``with Progress(total, "fit") as bar: bar.update(k, note)``.

    Draws on stderr only when `enabled` is true and stderr is a terminal or `force` is set, so logs
    and pipes stay clean. `note` is a short free text (e.g. the current best criterion).
    """

    def __init__(self, total: float, label: str, enabled: bool = True, force: bool = False, width: int = 30):
        self.total = float(total) if total else 1.0
        self.label = label
        self.width = width
        self.done = 0.0
        self.enabled = enabled and (force or sys.stderr.isatty())
        self._last = 0.0
        self._start = time.monotonic()

    def __enter__(self) -> "Progress":
        return self

    def __exit__(self, *exc) -> None:
        if self.enabled:
            self._draw("", final=True)
            sys.stderr.write("\n")
            sys.stderr.flush()

    def update(self, done: float, note: str = "") -> None:
        """Set progress to `done` out of `total` and redraw at most 10 times a second."""
        self.done = min(float(done), self.total)
        now = time.monotonic()
        if self.enabled and (now - self._last > 0.1 or self.done >= self.total):
            self._last = now
            self._draw(note)

    def advance(self, step: float = 1.0, note: str = "") -> None:
        """Add `step` to the progress."""
        self.update(self.done + step, note)

    def _draw(self, note: str, final: bool = False) -> None:
        frac = self.done / self.total
        filled = int(round(frac * self.width))
        elapsed = time.monotonic() - self._start
        bar = "#" * filled + "-" * (self.width - filled)
        sys.stderr.write(f"\r{self.label} [{bar}] {100 * frac:5.1f}% {elapsed:6.1f}s {note}".ljust(90))
        sys.stderr.flush()
