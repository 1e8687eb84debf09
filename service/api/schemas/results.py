"""``JobResult``: the result document of any job kind, told apart by ``kind``.

The union is built from the registry: every kind that names a result model on its
``JobKind`` (``result=``) is a member, in registry order. Kinds registered later
from ``job_kind_modules`` join the OpenAPI document's union when it is built
(``service/api/openapi.py``).
"""

from __future__ import annotations

from typing import Annotated, Any, Union

from pydantic import Field, RootModel

from service.jobs.registry import REGISTRY

__all__ = ["RESULT_MODELS", "JobResult"]

#: Kind name -> its result model, for the kinds that declare one.
RESULT_MODELS = {k.name: k.result for k in REGISTRY.values() if k.result is not None}

_Union: Any = Union[tuple(RESULT_MODELS.values())]  # noqa: UP007 - built at run time from the registry


class JobResult(RootModel[Annotated[_Union, Field(discriminator="kind")]]):
    """A job's result document; ``kind`` tells which."""
