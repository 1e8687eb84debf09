"""The one table from error classes to problem types: every class carries a slug and title, one status."""

from __future__ import annotations

from pathlib import Path

import service.analytics  # noqa: F401  (imports every analytics module, so their error subclasses exist)
import service.app  # noqa: F401  (imports every router and job kind, so every error subclass exists)
from service.analytics import errors as aerr
from service.api import errors as apierr
from service.api.problems import PROBLEM_STATUS, problem_for, status_for
from service.intake import errors as ierr
from service.jobs import errors as jerr
from storage import errors as serr

ROOT = Path(__file__).resolve().parents[2]
FAMILIES: tuple[type[Exception], ...] = (
    serr.StorageError, ierr.IntakeError, aerr.AnalyticsError, jerr.JobsError, apierr.ApiError,
)
# Error classes that carry no HTTP problem type, and why.
NOT_IN_TABLE = {
    serr.StorageError: "a bare storage failure is an internal error",
    jerr.JobsError: "a bare job-layer failure is an internal error",
    apierr.ApiError: "a bare HTTP-layer failure is an internal error",
    jerr.Released: "the worker gives the job back; never shown as a problem",
    jerr.WorkerLost: "only a failed job's error (the job's worker died)",
    jerr.JobTimeout: "only a failed job's error (the job ran past its limit)",
}


def subclasses(root: type[BaseException]) -> set[type[BaseException]]:
    """``root`` and every subclass the service or storage defines (not ones a test defines)."""
    out = {root}
    for sub in root.__subclasses__():
        if sub.__module__.startswith(("service.", "storage.")):
            out |= subclasses(sub)
    return out


def reachable_from_table() -> set[type[BaseException]]:
    found: set[type[BaseException]] = set()
    for cls in PROBLEM_STATUS:
        found |= subclasses(cls)
    return found


def test_every_class_reachable_from_the_table_has_a_slug_a_title_and_one_status() -> None:
    classes = reachable_from_table()
    # The projection and backbone errors live beside their functions; the walk must see them.
    assert {c.__name__ for c in classes} >= {"EmptyBackbone", "UnknownProjection", "MissingColumn", "TooDeep"}
    by_slug: dict[str, set[tuple[str, int]]] = {}
    for cls in classes:
        slug, title = getattr(cls, "slug", None), getattr(cls, "title", None)
        assert isinstance(slug, str) and slug, cls
        assert isinstance(title, str) and title, cls
        status = status_for(cls)
        assert status is not None, cls
        # Every table row in the class's ancestry that carries the same slug gives the same status.
        same_slug_rows = {PROBLEM_STATUS[k] for k in cls.__mro__ if k in PROBLEM_STATUS and k.slug == slug}
        assert same_slug_rows <= {status}, (cls, same_slug_rows)
        by_slug.setdefault(slug, set()).add((title, status))
    # One slug, one title and one status, whichever class carries it.
    for slug, seen in by_slug.items():
        assert len(seen) == 1, (slug, seen)


def test_every_error_class_is_in_the_table_or_named_as_outside_it() -> None:
    everything: set[type[BaseException]] = set()
    for root in FAMILIES:
        everything |= subclasses(root)
    outside = everything - reachable_from_table()
    assert outside == set(NOT_IN_TABLE), sorted(c.__name__ for c in outside ^ set(NOT_IN_TABLE))
    for cls in (serr.StorageError, jerr.JobsError, apierr.ApiError, jerr.Released):
        assert jerr.problem_type(cls()) is None and problem_for(cls()) is None
    # The job-only types carry a slug and title but no HTTP status.
    for cls in (jerr.WorkerLost, jerr.JobTimeout):
        assert jerr.problem_type(cls()) == (cls.slug, cls.title) and status_for(cls) is None


def test_readme_lists_every_problem_type() -> None:
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    slugs = {c.slug for c in reachable_from_table()} | {jerr.WorkerLost.slug, jerr.JobTimeout.slug}
    missing = sorted(s for s in slugs if f"`/problems/{s}`" not in readme)
    # lease-lost is only raised between a worker and the queue; no caller ever receives it.
    assert missing == ["lease-lost"], missing
