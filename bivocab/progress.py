"""Progress and timing of a build: one bar per stage on a terminal, and the time per stage
(``bivocab build --profile``) so that users can see where the time goes.

A :class:`BuildMeter` always records timings; it draws bars only when asked to (the CLI asks
when stderr is a terminal and ``--quiet`` is not given).

>>> meter = BuildMeter()
>>> with meter.stage("scan", unit="B") as advance:
...     advance(100, words=20)
>>> [(t.name, t.amount, t.words) for t in meter.timings]
[('scan', 100.0, 20)]
"""

from __future__ import annotations

import contextlib
import time
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Callable, Iterator

if TYPE_CHECKING:   # rich is loaded only when bars are drawn (about 30 ms a build need not wait for)
    from rich.progress import Progress, TaskID

Advance = Callable[..., None]


@dataclass
class StageTiming:
    name: str
    seconds: float = 0.0
    amount: float = 0.0          # progress units done (bytes, sentences, conditions...)
    unit: str = ""
    words: int = 0               # whitespace-separated words (tokens for the scan) handled
    details: dict[str, float] = field(default_factory=dict)   # named parts, in seconds


class BuildMeter:
    """Stage timings of one build, with optional rich progress bars on stderr.

    ``on_stage`` is called with each stage name as it starts (for simple callers that only want
    to print the stage); the build adds hooks of its own to ``stage_hooks``.
    """

    def __init__(self, bars: bool = False, on_stage: Callable[[str], None] | None = None) -> None:
        self.bars = bars
        self.stage_hooks: list[Callable[[str], None]] = [on_stage] if on_stage is not None else []
        self.timings: list[StageTiming] = []
        self._progress: Progress | None = None
        self._open: tuple[StageTiming, float, TaskID | None] | None = None
        self._started = time.perf_counter()

    @contextlib.contextmanager
    def stage(self, name: str, total: float | None = None, unit: str = "") -> Iterator[Advance]:
        """Time the body as stage ``name``; the yielded ``advance(amount, words=0)`` moves its bar."""
        advance = self.begin(name, total, unit)
        try:
            yield advance
        finally:
            self.end()

    def begin(self, name: str, total: float | None = None, unit: str = "") -> Advance:
        """Start stage ``name`` (ending the current one); return its ``advance(amount, words=0)``."""
        self.end()
        timing = StageTiming(name, unit=unit)
        self.timings.append(timing)
        for hook in self.stage_hooks:
            hook(name)
        progress = self._bar_display() if self.bars else None
        task = progress.add_task(name, total=total, words=0, unit=unit) if progress is not None else None
        self._open = (timing, time.perf_counter(), task)

        def advance(amount: float = 1, words: int = 0) -> None:
            timing.amount += amount
            timing.words += words
            if progress is not None:
                progress.update(task, advance=amount, words=timing.words)

        return advance

    def end(self) -> None:
        """End the current stage, if one is running."""
        if self._open is None:
            return
        timing, start, task = self._open
        self._open = None
        timing.seconds = time.perf_counter() - start
        if self._progress is not None and task is not None:
            # A finished stage shows a full bar, even where its total was unknown or an estimate.
            done = timing.amount or 1
            self._progress.update(task, total=done, completed=done)
            self._progress.stop_task(task)

    def detail(self, name: str, seconds: float) -> None:
        """Add time to a named part of the current stage (e.g. worker time per step)."""
        if self.timings:
            details = self.timings[-1].details
            details[name] = details.get(name, 0.0) + seconds

    def close(self) -> None:
        """End the current stage and take the bars off the screen's live area."""
        self.end()
        if self._progress is not None:
            self._progress.stop()
            self._progress = None

    def _bar_display(self) -> Progress:
        if self._progress is None:
            from rich.console import Console
            from rich.progress import BarColumn, Progress, TaskProgressColumn, TextColumn, TimeElapsedColumn

            self._progress = Progress(
                TextColumn("{task.description:<12}"), BarColumn(), TaskProgressColumn(),
                _rate_column(), TimeElapsedColumn(), console=Console(stderr=True))
            self._progress.start()
        return self._progress

    def profile_text(self) -> str:
        """Time per stage (and per part, where recorded), as a plain-text table."""
        total = time.perf_counter() - self._started
        lines = [f"{'stage':<24} {'seconds':>9} {'share':>6}  throughput"]
        for t in self.timings:
            rate = ""
            if t.words and t.seconds > 0:
                rate = f"{t.words / t.seconds / 1e6:.2f} M words/s"
            elif t.amount and t.seconds > 0 and t.unit:
                rate = _human_rate(t.amount / t.seconds, t.unit)
            lines.append(f"{t.name:<24} {t.seconds:>9.3f} {100 * t.seconds / total:>5.1f}%  {rate}")
            for part, seconds in t.details.items():
                lines.append(f"  {part:<22} {seconds:>9.3f}")
        lines.append(f"{'total':<24} {total:>9.3f} 100.0%")
        return "\n".join(lines)


def _human_rate(rate: float, unit: str) -> str:
    if unit == "B":
        return f"{rate / 1e6:.1f} MB/s"
    return f"{rate:,.0f} {unit}/s"


def _rate_column() -> Any:
    """A rich column with the throughput of a stage: words per second where known, else its
    own unit per second."""
    from rich.progress import ProgressColumn, Task
    from rich.text import Text

    class RateColumn(ProgressColumn):
        def render(self, task: Task) -> Text:
            elapsed = task.elapsed or 0.0
            if not elapsed:
                return Text("")
            words = task.fields.get("words", 0)
            if words:
                return Text(f"{words / elapsed / 1e6:.2f} M words/s")
            unit = task.fields.get("unit", "")
            return Text(_human_rate(task.completed / elapsed, unit) if unit else "")

    return RateColumn()
