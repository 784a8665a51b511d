"""The key reference of the config as Markdown (the generated part of configs/README.md)."""

from __future__ import annotations

from . import _schema as s
from ._sections import (CampaignSpec, ComputeSpec, DiagnosisSpec, IsotropicSpec, LaminateSpec,
                        OrthotropicSpec, OutputSpec, PlanSpec, RegistrationSpec, RunSpec, TopLevel)


def markdown_reference() -> str:
    """The key reference of the config, as Markdown (for configs/README.md)."""
    parts = [
        s.markdown_reference(TopLevel, "top level", title="top level"),
        s.markdown_reference(CampaignSpec, "campaign"),
        s.markdown_reference(OrthotropicSpec, "materials.NAME", title="materials.NAME (orthotropic ply)"),
        s.markdown_reference(IsotropicSpec, "materials.NAME", title="materials.NAME (isotropic)"),
        s.markdown_reference(LaminateSpec, "laminate", title="laminate and laminates.NAME"),
        s.markdown_reference(RunSpec, "run", title="[[run]]"),
        s.markdown_reference(RegistrationSpec, "registration"),
        s.markdown_reference(DiagnosisSpec, "diagnosis"),
        s.markdown_reference(ComputeSpec, "compute"),
        s.markdown_reference(OutputSpec, "output"),
        s.markdown_reference(PlanSpec, "plan"),
    ]
    return "\n".join(parts)
