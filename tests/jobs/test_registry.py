"""The job-kind registry: lookup, params validation, registration, and the jobs package surface."""

from __future__ import annotations

import pytest
from pydantic import BaseModel, ConfigDict

import service.jobs as jobs_pkg
from service.jobs import registry
from service.jobs.errors import InvalidJobParams, UnknownKind
from service.jobs.kinds import JobKind, TaskOutput


def test_profile_is_registered_with_a_strict_params_model() -> None:
    kind = registry.get_kind("profile")
    params = registry.parse_params(kind, {"random_seed": 3})
    assert params.model_dump() == {"random_seed": 3, "bfs_samples": None, "bootstrap": 0}
    with pytest.raises(InvalidJobParams) as info:
        registry.parse_params(kind, {"random_seed": -1, "colour": "red"})
    locs = sorted(tuple(e["loc"]) for e in info.value.data["errors"])  # type: ignore[attr-defined]
    assert locs == [("params", "colour"), ("params", "random_seed")]


def test_unknown_kind_names_the_known_ones() -> None:
    with pytest.raises(UnknownKind, match="profile"):
        registry.get_kind("astrology")


def test_register_refuses_silent_replacement() -> None:
    class P(BaseModel):
        model_config = ConfigDict(extra="forbid")

    k = JobKind("profile", P, lambda ctx, p: TaskOutput({}), "x", "y")
    with pytest.raises(ValueError):
        registry.register(k)
    assert registry.get_kind("profile") is not k


def test_package_all_matches_modules() -> None:
    for name in jobs_pkg.__all__:
        assert hasattr(jobs_pkg, name), name
