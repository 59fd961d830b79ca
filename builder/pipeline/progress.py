"""Progress display: a rich bar on a terminal, plain lines otherwise, or nothing.

The bar advances by *estimated cost* (seconds predicted by the plan's model),
not by unit count, because units grow with the level; the ETA is the remaining
estimated cost scaled by the ratio of measured to estimated time so far.
Columns: units done/total, rate (units/min), ETA, units in progress.
"""

from __future__ import annotations

import sys
import time

from rich.console import Console
from rich.progress import BarColumn, Progress, TextColumn


def fmt_seconds(s: float | None) -> str:
    if s is None or s != s or s == float("inf"):
        return "?"
    s = int(round(s))
    if s < 60:
        return f"{s}s"
    if s < 3600:
        return f"{s // 60}m{s % 60:02d}s"
    h, rest = divmod(s, 3600)
    if h < 48:
        return f"{h}h{rest // 60:02d}m"
    return f"{h // 24}d{h % 24:02d}h"


class Reporter:
    """Tracks the numbers; subclasses show them."""

    def __init__(self, total_units: int, total_cost: float) -> None:
        self.total_units = total_units
        self.total_cost = max(total_cost, 1e-9)
        self.done_units = 0
        self.done_cost = 0.0
        self.t0 = time.monotonic()
        self.current = ""

    def elapsed(self) -> float:
        return time.monotonic() - self.t0

    def eta(self) -> float | None:
        if self.done_cost <= 0:
            return None
        scale = self.elapsed() / self.done_cost
        return max(self.total_cost - self.done_cost, 0.0) * scale

    def rate(self) -> str:
        el = self.elapsed()
        if self.done_units == 0 or el <= 0:
            return "?"
        per_min = 60 * self.done_units / el
        return f"{per_min:.1f}/min" if per_min < 600 else f"{per_min / 60:.0f}/s"

    def start(self) -> None:
        pass

    def advance(self, cost: float, current: str) -> None:
        self.done_units += 1
        self.done_cost += cost
        self.current = current
        self.show()

    def set_current(self, current: str) -> None:
        self.current = current
        self.refresh()

    def refresh(self) -> None:
        """Show a change of the current units (rate-limited like show())."""
        self.show()

    def show(self) -> None:
        pass

    def stop(self) -> None:
        pass

    def line(self) -> str:
        return (
            f"{self.done_units}/{self.total_units} units, {self.rate()}, "
            f"ETA {fmt_seconds(self.eta())}, now: {self.current or '-'}"
        )


class RichReporter(Reporter):
    def __init__(self, total_units: int, total_cost: float, console: Console) -> None:
        super().__init__(total_units, total_cost)
        self.progress = Progress(
            TextColumn("[bold]units[/bold] {task.fields[units]}"),
            BarColumn(),
            TextColumn("{task.percentage:>3.0f}%"),
            TextColumn("{task.fields[rate]}"),
            TextColumn("ETA {task.fields[eta]}"),
            TextColumn("[dim]{task.fields[current]}"),
            console=console,
            transient=False,
            refresh_per_second=4,
        )
        self.task = None

    def _fields(self) -> dict:
        return {
            "units": f"{self.done_units}/{self.total_units}",
            "rate": self.rate(),
            "eta": fmt_seconds(self.eta()),
            "current": self.current,
        }

    def start(self) -> None:
        self.progress.start()
        self.task = self.progress.add_task("run", total=self.total_cost, **self._fields())

    def show(self) -> None:
        if self.task is not None:
            self.progress.update(self.task, completed=self.done_cost, **self._fields())

    def stop(self) -> None:
        self.show()
        self.progress.stop()


class LineReporter(Reporter):
    """For logs and pipes: one line at most every ``every`` seconds, and at the end."""

    def __init__(self, total_units: int, total_cost: float, stream=None, every: float = 10):
        super().__init__(total_units, total_cost)
        self.stream = stream or sys.stderr
        self.every = every
        self.last = 0.0

    def show(self) -> None:
        now = time.monotonic()
        if self.total_units and now - self.last >= self.every:
            self.last = now
            print(self.line(), file=self.stream, flush=True)

    def stop(self) -> None:
        if self.total_units:
            print(self.line(), file=self.stream, flush=True)


def make_reporter(mode: str, total_units: int, total_cost: float, console: Console) -> Reporter:
    """mode: 'auto' (bar on a terminal, lines otherwise), 'bar', 'lines', 'none'."""
    if mode == "auto":
        mode = "bar" if console.is_terminal else "lines"
    if total_units == 0:
        mode = "none"
    if mode == "bar":
        return RichReporter(total_units, total_cost, console)
    if mode == "lines":
        return LineReporter(total_units, total_cost, console.file)
    return Reporter(total_units, total_cost)
