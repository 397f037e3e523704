"""A page's pictures as jobs: each made and drawn when the page's view is complete, shared
between this process and a forked copy of it where the machine allows (core.forked).

Making and drawing a dozen pictures is most of a report's time. A page asks for each
picture with ``jobs.later(weight, function, *arguments)`` and gets a stand-in at once;
``jobs.done(view)`` runs every job (each process about half the weight) and returns the view with each stand-in
replaced by what its function returned. The same pages either way. Another page made from the
same files can be a job too (the summary beside the report's pictures: ``jobs.result``).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

from pipeline.core.forked import called, map_shared


@dataclass(frozen=True)
class Later:
    """Stands in a view for what a job returns until the jobs are done."""

    job: int


class PictureJobs:
    """The pictures a page asks for, run together by ``done``."""

    def __init__(self) -> None:
        self.jobs: list[tuple[float, functools.partial]] = []
        self.results: dict[int, object] = {}

    def later(self, weight: float, function, *arguments, **options) -> Later:
        """Return a stand-in for ``function(*arguments, **options)``; ``weight`` is the job's
        rough cost (about a picture's drawing each), to share the work out evenly."""
        self.jobs.append((weight, functools.partial(function, *arguments, **options)))
        return Later(len(self.jobs) - 1)

    def done(self, view):
        """Run every job and return the view (dicts, lists and tuples, as deep as they go) with
        each stand-in replaced by its job's result."""
        results = map_shared(called, [job for _, job in self.jobs], [weight for weight, _ in self.jobs])
        self.results = dict(enumerate(results))
        return _replaced(view, self.results)

    def result(self, later: Later):
        """Return what a job returned, once the jobs are done (a job whose result no view holds:
        another page made beside the pictures)."""
        return self.results[later.job]


def _replaced(value, results: dict):
    if isinstance(value, Later):
        return results[value.job]
    if isinstance(value, dict):
        return {key: _replaced(item, results) for key, item in value.items()}
    if isinstance(value, list):
        return [_replaced(item, results) for item in value]
    if isinstance(value, tuple) and not hasattr(value, "_fields"):
        return tuple(_replaced(item, results) for item in value)
    return value
