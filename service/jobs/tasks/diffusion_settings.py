"""The diffusion settings shared by ``forecast``, ``shortlist`` and next contacts.

They live in :mod:`service.usecases.diffusion_settings`, below the job kinds, so
that a use case can build on them without importing the job package (whose
registry imports every kind, and so the use cases); this module keeps the name
the kinds and the HTTP schemas import them by.
"""

from __future__ import annotations

from service.usecases.diffusion_settings import MAX_ROUNDS, DiffusionSettings, ProbabilitySettings

__all__ = ["ProbabilitySettings", "DiffusionSettings", "MAX_ROUNDS"]
