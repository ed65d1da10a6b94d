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
        self.times: dict[str, float] = {}      # seconds per stage (summed over a
        #                                         fund's parts), quiet or not
        self.live = (not quiet and hasattr(self.stream, "isatty") and self.stream.isatty()
                     and not os.environ.get("CI"))
        self._console = None
        if self.live:
            from rich.console import Console

            self._console = Console(file=self.stream)

    @contextlib.contextmanager
    def stage(self, name: str, part: str | None = None) -> Iterator[None]:
        """Time stage ``name``; ``part`` (a fund's total or mandate) is shown beside it, and
        the time is summed under ``name`` over the parts."""
        start = time.perf_counter()
        shown = f"{name} ({part})" if part else name
        if self._console is not None:            # only on a terminal, never when quiet
            with self._console.status(f"{shown}..."):
                yield
        else:
            yield
        seconds = time.perf_counter() - start
        self.times[name] = self.times.get(name, 0.0) + seconds
        if self.quiet:
            return
        if self._console is not None:
            self._console.print(f"[green]\u2713[/green] {shown} [dim]{seconds:.2f} s[/dim]")
        else:
            print(f"reporter: {shown} done ({seconds:.2f} s)", file=self.stream, flush=True)


class BatchProgress:
    """Progress of many schemes: a bar on a terminal, one plain line per scheme otherwise."""

    def __init__(self, quiet: bool = False, stream=None) -> None:
        self.stream = stream or sys.stderr
        self.quiet = quiet
        self.live = (not quiet and hasattr(self.stream, "isatty") and self.stream.isatty()
                     and not os.environ.get("CI"))
        self._bar = None
        self._task = None

    def __enter__(self) -> BatchProgress:
        if self.live:
            from rich.console import Console
            from rich.progress import BarColumn, MofNCompleteColumn, Progress, TimeElapsedColumn

            self._bar = Progress("[progress.description]{task.description}", BarColumn(),
                                 MofNCompleteColumn(), TimeElapsedColumn(),
                                 console=Console(file=self.stream), transient=True)
            self._bar.start()
        return self

    def update(self, result, done: int, total: int) -> None:
        line = f"[{done}/{total}] {result.scheme} {result.status} ({result.seconds:.1f} s)"
        if self.quiet:
            return
        if self._bar is not None:
            if self._task is None:
                self._task = self._bar.add_task("building", total=total)
            self._bar.update(self._task, completed=done, description=f"built {result.scheme}")
            if result.status != "built":
                self._bar.console.print(f"[red]{line}[/red]: {result.reason}")
        else:
            print(f"reporter: {line}", file=self.stream, flush=True)

    def __exit__(self, *exc) -> None:
        if self._bar is not None:
            self._bar.stop()
