"""Progress with elapsed time and an estimated time to completion (ETA), for the commands and the API.

Not a command (no ``HELP``): the pieces that turn a driver's progress calls into
:class:`Progress` updates, shared by ``kindyn run``, ``ensemble``, ``modes`` (lines on stderr
through :class:`kindyn.commands.common.Reporter`) and :mod:`kindyn.api` (a user's callback or a
progress bar).

How the ETA of a growth run is estimated (:class:`GrowthEta`): the run stops when the error of
the growth estimate falls below the tolerance (after ``run.min_time``) or at ``max_time``. The
errors of successive estimates are fitted as ``error ~ C t^(-p)`` (least squares in log-log over
the last estimates); while they fall (``p > 0``) the convergence time is ``t_c = t (error /
tolerance)^(1/p)``; the run's end is ``min(max(t_c, min_time), max_time)`` (only ``max_time`` while
there is no falling error), converted to wall-clock seconds with the simulated time per second
measured so far. The estimate is a guide: it says which stop it expects (``convergence`` or
``max_time``).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass
from typing import Callable


@dataclass(frozen=True)
class Progress:
    """One progress update: ``text`` (what is being computed), seconds ``elapsed``, ``eta`` (seconds
    still to go, None when unknown), ``fraction`` done in [0, 1] (None when unknown), ``until`` (the
    stop the ETA expects: "convergence", "max_time", "remaining solves", ...)."""

    command: str
    text: str
    elapsed: float
    eta: float | None = None
    fraction: float | None = None
    until: str = ""

    def line(self) -> str:
        """``text | elapsed 12 s, ETA 30 s (convergence)``."""
        tail = f"elapsed {duration(self.elapsed)}"
        if self.eta is not None:
            tail += f", ETA {duration(self.eta)}" + (f" ({self.until})" if self.until else "")
        return f"{self.text} | {tail}"


def duration(seconds: float) -> str:
    seconds = max(0.0, float(seconds))
    if seconds < 120:
        return f"{seconds:.0f} s"
    if seconds < 7200:
        return f"{seconds / 60:.1f} min"
    return f"{seconds / 3600:.1f} h"


class Throttle:
    """Passes on at most one update per ``interval`` seconds (the first and forced ones always)."""

    def __init__(self, sink: Callable[[Progress], None], interval: float = 2.0, clock=time.monotonic):
        self.sink, self.interval, self.clock = sink, interval, clock
        self.last = -math.inf

    def __call__(self, update: Progress, force: bool = False) -> None:
        now = self.clock()
        if force or now - self.last >= self.interval:
            self.last = now
            self.sink(update)


class GrowthEta:
    """ETA of a growth run from its running estimate (see the module docstring)."""

    HISTORY = 6  # estimates in the log-log fit of the error

    def __init__(self, tolerance: float, max_time: float, min_time: float = 0.0, clock=time.monotonic):
        self.tolerance, self.max_time, self.min_time = float(tolerance), float(max_time), float(min_time)
        self.clock = clock
        self.started = clock()
        self.t0: float | None = None  # simulated time at the first update (a resumed run starts late)
        self.errors: list[tuple[float, float]] = []

    def observe(self, t: float, error: float) -> tuple[float, float | None, float | None, str]:
        """``(elapsed, eta, fraction, until)`` after the update at simulated time ``t``."""
        now = self.clock()
        elapsed = now - self.started
        if self.t0 is None:
            self.t0 = t
        if math.isfinite(error) and error > 0 and (not self.errors or error != self.errors[-1][1]):
            self.errors.append((t, error))
            del self.errors[:-self.HISTORY]
        speed = (t - self.t0) / elapsed if elapsed > 0 else 0.0
        if speed <= 0 or t <= 0:
            return elapsed, None, None, ""
        end, until = self.max_time, "max_time"
        converge = self.convergence_time(t)
        if converge is not None and converge < self.max_time:
            end, until = max(converge, self.min_time, t), "convergence"
        eta = max(0.0, (end - t) / speed)
        return elapsed, eta, min(1.0, t / end) if end > 0 else None, until

    def convergence_time(self, t: float) -> float | None:
        """The simulated time at which the fitted error reaches the tolerance (None: not falling)."""
        points = [(s, e) for s, e in self.errors if s > 0]
        if not points:
            return None
        if points[-1][1] <= self.tolerance:
            return t
        if len(points) < 2:
            return None
        x = [math.log(s) for s, _ in points]
        y = [math.log(e) for _, e in points]
        mx, my = sum(x) / len(x), sum(y) / len(y)
        sxx = sum((a - mx) ** 2 for a in x)
        if sxx <= 0:
            return None
        slope = sum((a - mx) * (b - my) for a, b in zip(x, y)) / sxx
        if slope >= -0.05:  # not falling (noisy or growing error): no convergence time
            return None
        last_t, last_e = points[-1]
        return last_t * (last_e / self.tolerance) ** (1.0 / -slope)


def growth_progress_text(t, estimate, tolerance) -> str:
    """The progress line of a growth run at simulated time ``t``."""
    if not math.isfinite(estimate.growth_rate):
        return f"  t = {t:10.4g}   collecting samples"
    if not math.isfinite(estimate.error):
        return f"  t = {t:10.4g}   gamma = {estimate.growth_rate:+.6g} (no error estimate yet)"
    return (f"  t = {t:10.4g}   gamma = {estimate.growth_rate:+.6g} +- {estimate.error:.2g}"
            f"   (tolerance {tolerance:.2g}, {min(estimate.error / tolerance, 999):.3g}x)")


def growth_reporter(case, sink: Callable[[Progress], None], command: str = "run", prefix: str = "",
                    clock=time.monotonic):
    """A ``progress(t, estimate, tolerance)`` callable for :func:`kindyn.run.run_growth` that sends
    :class:`Progress` updates with an ETA to ``sink`` (the driver calls it every two seconds)."""
    from kindyn.run import default_max_time, default_tolerance

    eta = GrowthEta(default_tolerance(case), default_max_time(case), case.run.min_time, clock)

    def progress(t, estimate, tolerance):
        elapsed, remaining, fraction, until = eta.observe(t, estimate.error)
        sink(Progress(command, prefix + growth_progress_text(t, estimate, tolerance), elapsed, remaining,
                      fraction, until))

    progress.eta = eta
    return progress


class CountEta:
    """ETA of ``total`` similar pieces of work (solves, realisations) from the ones done so far."""

    def __init__(self, total: int, clock=time.monotonic):
        self.total, self.clock = max(1, int(total)), clock
        self.started = clock()

    def at(self, done: float) -> tuple[float, float | None, float]:
        """``(elapsed, eta, fraction)`` with ``done`` pieces finished (fractions allowed)."""
        elapsed = self.clock() - self.started
        fraction = min(1.0, max(0.0, done / self.total))
        eta = elapsed * (1.0 - fraction) / fraction if fraction > 0 else None
        return elapsed, eta, fraction
