"""Stage progress: a live status line on a terminal, plain lines in a pipe or in CI."""

from __future__ import annotations

import contextlib
import os
import sys
import time
from collections.abc import Iterator


class Progress:
    """Reports the stages of a long job on stderr; silent when ``quiet``."""

    def __init__(self, quiet: bool = False, stream=None) -> None:
        self.stream = stream or sys.stderr
        self.quiet = quiet
        self.live = (not quiet and hasattr(self.stream, "isatty") and self.stream.isatty()
                     and not os.environ.get("CI"))
        self._console = None
        if self.live:
            from rich.console import Console

            self._console = Console(file=self.stream)

    @contextlib.contextmanager
    def stage(self, name: str) -> Iterator[None]:
        start = time.perf_counter()
        if self.quiet:
            yield
            return
        if self._console is not None:
            with self._console.status(f"{name}..."):
                yield
            self._console.print(f"[green]\u2713[/green] {name} "
                                f"[dim]{time.perf_counter() - start:.2f} s[/dim]")
        else:
            yield
            print(f"reporter: {name} done ({time.perf_counter() - start:.2f} s)",
                  file=self.stream, flush=True)
