"""The key reference of the config as Markdown (the generated part of configs/README.md)."""

from __future__ import annotations

from . import _schema
from ._sections import (CampaignSpec, ComputeSpec, DiagnosisSpec, IsotropicSpec, LaminateSpec,
                        OrthotropicSpec, OutputSpec, PlanSpec, RegistrationSpec, RunSpec, TopLevel)


def markdown_reference() -> str:
    """The key reference of the config, as Markdown (for configs/README.md): every table once."""
    return _schema.markdown_reference([
        (TopLevel, "top level", "Top level"),
        (CampaignSpec, "campaign", None),
        (OrthotropicSpec, "materials.NAME", "`materials.NAME`: an orthotropic ply material"),
        (IsotropicSpec, "materials.NAME", "`materials.NAME`: an isotropic material"),
        (LaminateSpec, ["laminate", "laminates.NAME"], None),
        (RunSpec, "run", "`[[run]]`: one table per run"),
        (RegistrationSpec, "registration", None),
        (DiagnosisSpec, "diagnosis", None),
        (ComputeSpec, "compute", None),
        (OutputSpec, "output", None),
        (PlanSpec, "plan", None),
    ], shallow=(TopLevel,))
