"""Progress on the terminal for long runs: a tqdm bar on stderr when stderr is a terminal, and
nothing at all otherwise (logs and pipes stay clean)."""

from __future__ import annotations

import sys


class Progress:
    """A bar of ``total`` steps. ``step(label)`` names what runs next and advances by one."""

    def __init__(self, total: int, desc: str, enabled: bool | None = None):
        self.enabled = sys.stderr.isatty() if enabled is None else enabled
        self._bar = None
        if self.enabled:
            from tqdm import tqdm

            self._bar = tqdm(
                total=total,
                desc=desc,
                file=sys.stderr,
                unit="step",
                leave=False,
                bar_format="{desc}: {percentage:3.0f}%|{bar}| {n_fmt}/{total_fmt} [{elapsed}<{remaining}] {postfix}",
            )

    def note(self, label: str) -> None:
        """Show what runs now, without advancing."""
        if self._bar is not None:
            self._bar.set_postfix_str(label, refresh=True)

    def step(self, n: int = 1) -> None:
        if self._bar is not None:
            self._bar.update(n)

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()
            self._bar = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False
