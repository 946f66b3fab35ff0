"""Live progress of a review's stages on the terminal: a spinner with the elapsed seconds of the
running stage, and one line per finished stage with its wall-clock seconds."""

from __future__ import annotations

import time
from types import TracebackType

from rich.console import Console
from rich.progress import Progress, SpinnerColumn, TextColumn, TimeElapsedColumn


class StageProgress:
    """A ``progress`` callback for :func:`querygap.review.run_review` (use as a context manager).

    Each call names the stage that starts now (``"score"`` or ``"score: detail"``); the stage
    before it is then finished and printed as ``<stage>  <seconds> s``. The lines are printed
    only on a terminal unless ``lines`` says otherwise, so piped output and error messages stay
    as they are.
    """

    def __init__(
        self, console: Console, title: str = "Reviewing", lines: bool | None = None
    ) -> None:
        self.console, self.title = console, title
        self.lines = console.is_terminal if lines is None else lines
        self.progress = Progress(
            SpinnerColumn(),
            TextColumn("{task.description}"),
            TimeElapsedColumn(),
            console=console,
            transient=True,
        )
        self.stage: str | None = None
        self.started = 0.0
        self.task = self.progress.add_task(title, total=None)
        self.t0 = time.perf_counter()

    def __enter__(self) -> StageProgress:
        self.t0 = time.perf_counter()
        if self.console.is_terminal:  # off a terminal a live display would only print blank lines
            self.progress.start()
        return self

    def __call__(self, message: str) -> None:
        stage = message.split(":")[0]
        if stage != self.stage:
            self._finish()
            self.stage, self.started = stage, time.perf_counter()
            self.progress.reset(self.task, total=None)
        self.progress.update(self.task, description=f"{self.title}: {message}")

    def _finish(self) -> None:
        if self.stage is not None and self.lines:
            seconds = time.perf_counter() - self.started
            self.console.print(
                f"  {self.stage:<10} {seconds:8.1f} s", markup=False, highlight=False
            )
            self.stage = None

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        if exc_type is None and self.lines:
            self._finish()
            total = time.perf_counter() - self.t0
            self.console.print(f"  {'total':<10} {total:8.1f} s", markup=False, highlight=False)
        if self.console.is_terminal:
            self.progress.stop()
