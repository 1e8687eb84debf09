"""The diffusion settings shared by ``forecast``, ``shortlist`` and next contacts.

One pydantic model, :class:`DiffusionSettings`, holds the four settings of
PRODUCT.md ("diffusion settings shared by forecast, shortlist and next
contacts"): ``model`` (``ic`` or ``lt``), ``probability`` (``{scheme, p, q}``),
``rounds`` (the horizon) and ``random_seed``. A kind's params model inherits
from it, so the four appear at the top level of the job's params::

    class ShortlistParams(DiffusionSettings):
        budget: int = ...

    dg = params.diffusion_graph(ctx.load())   # cached per process

What can be checked without the graph is checked when the params are parsed
(a 422 before anything is queued): ``p`` is required by ``uniform`` and only
allowed there, ``q`` likewise for ``per_interaction``, both in [0, 1].
What needs the graph (``explicit`` on a version uploaded without
probabilities; Linear Threshold whose incoming weights sum above 1) is
checked by :meth:`DiffusionSettings.check_version` without building the CSR
arrays, and again when :meth:`DiffusionSettings.diffusion_graph` builds them;
both raise :class:`~service.analytics.errors.InvalidParameter` (a 422 problem).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, SerializerFunctionWrapHandler, model_serializer, model_validator

from service.analytics.graph import DiffusionGraph, ProbabilityScheme

if TYPE_CHECKING:
    from service.usecases.loading import LoadedVersion

__all__ = ["ProbabilitySettings", "DiffusionSettings", "MAX_ROUNDS", "diffusion_graph_under"]

MAX_ROUNDS = 100_000


class ProbabilitySettings(BaseModel):
    """How each edge gets its activation probability (Independent Cascade) or weight (LT)."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    scheme: ProbabilityScheme | Literal["learned"] = Field(
        default="weighted_cascade",
        description=(
            "weighted_cascade: p(u->v) = 1/indegree(v); uniform: every edge p; trivalency: each "
            "edge drawn from {0.1, 0.01, 0.001} (reproducibly from random_seed); per_interaction: "
            "1 - (1 - q)^w for w interactions; normalized: w(u,v) / sum of w into v; explicit: the "
            "uploaded probability column; learned: learned from past campaigns (give model)."
        ),
    )
    p: float | None = Field(default=None, ge=0, le=1, description="The probability of every edge (uniform only).")
    q: float | None = Field(
        default=None, ge=0, le=1, description="The probability per interaction (per_interaction only)."
    )
    model: str | None = Field(
        default=None, min_length=1, max_length=40,
        description="The id of a learn_probabilities job on this graph (scheme learned only).",
    )

    @model_serializer(mode="wrap")
    def _without_an_absent_model(self, handler: SerializerFunctionWrapHandler) -> dict[str, Any]:
        # ``model`` appears only with the learned scheme, so other settings read as before.
        out: dict[str, Any] = handler(self)
        if out.get("model") is None:
            out.pop("model", None)
        return out

    @model_validator(mode="after")
    def _p_and_q_match_the_scheme(self) -> ProbabilitySettings:
        for name, needed_by in (("p", "uniform"), ("q", "per_interaction"), ("model", "learned")):
            given = getattr(self, name) is not None
            if self.scheme == needed_by and not given:
                what = "the id of a learn_probabilities job" if name == "model" else "a number in [0, 1]"
                raise ValueError(f"scheme {needed_by!r} needs probability.{name} ({what})")
            if self.scheme != needed_by and given:
                raise ValueError(f"probability.{name} applies to scheme {needed_by!r} only, not {self.scheme!r}")
        return self


class DiffusionSettings(BaseModel):
    """Model, edge probabilities, horizon and random seed of a diffusion computation."""

    model_config = ConfigDict(extra="forbid")

    model: Literal["ic", "lt"] = Field(
        default="ic", description="ic: Independent Cascade; lt: Linear Threshold (Kempe, Kleinberg and Tardos 2003)."
    )
    probability: ProbabilitySettings = Field(default_factory=ProbabilitySettings)
    rounds: int | None = Field(
        default=None, ge=1, le=MAX_ROUNDS, description="Horizon in rounds (campaign length); null: until it stops."
    )
    random_seed: int = Field(
        default=0, ge=0, le=2**63 - 1, description="Seeds the simulations and the trivalency draw."
    )

    def describe(self) -> dict[str, Any]:
        """The settings as they appear in result documents."""
        return {
            "model": self.model,
            "probability": self.probability.model_dump(),
            "rounds": self.rounds,
            "random_seed": self.random_seed,
        }

    def check_version(self, version: LoadedVersion) -> None:
        """Raise :class:`InvalidParameter` when these settings cannot run on ``version``.

        Costs O(edges) time and one float per arc; builds no CSR arrays. The
        same checks run when :meth:`diffusion_graph` builds the arrays.
        """
        from service.analytics.graph import arcs, check_lt_weights, edge_probabilities

        pr = self.probability
        g = version.graph
        if pr.scheme == "learned":
            from service.usecases.learned_models import learned_probabilities

            learned = learned_probabilities(pr.model or "", version, model=self.model)
            if self.model == "lt":
                check_lt_weights(arcs(g), learned)
            return
        if pr.scheme == "explicit" and g.probability is None:
            from service.analytics.errors import InvalidParameter

            raise InvalidParameter(
                "scheme 'explicit' needs a version uploaded with a probability column",
                field="probability.scheme",
            )
        if self.model == "lt":
            a = arcs(g)
            probs = edge_probabilities(a, pr.scheme, p=pr.p, q=pr.q, random_seed=self.random_seed)
            check_lt_weights(a, probs)

    def diffusion_graph(self, version: LoadedVersion) -> DiffusionGraph:
        """The version's :class:`DiffusionGraph` under these settings, built once per process."""
        return diffusion_graph_under(version, model=self.model, probability=self.probability,
                                     random_seed=self.random_seed)


def diffusion_graph_under(
    version: LoadedVersion, *, model: Literal["ic", "lt"], probability: ProbabilitySettings, random_seed: int = 0
) -> DiffusionGraph:
    """The version's :class:`DiffusionGraph` under a model and probability settings, built once per
    process; the learned scheme reads its probabilities from the named learn_probabilities job."""
    from service.usecases.diffusion_inputs import diffusion_graph_for

    pr = probability
    if pr.scheme == "learned":
        from service.usecases.learned_models import learned_diffusion_graph_for

        return learned_diffusion_graph_for(pr.model or "", version, model=model)
    return diffusion_graph_for(
        version.version_id, version.graph, model=model, scheme=pr.scheme, p=pr.p, q=pr.q,
        random_seed=random_seed,
    )
