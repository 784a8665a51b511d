"""The key reference of the config as Markdown (the generated part of configs/README.md)."""

from __future__ import annotations

from . import _schema
from ._sections import (CampaignSpec, ComputeSpec, DiagnosisSpec, IsotropicSpec, LaminateSpec,
                        OrthotropicSpec, OutputSpec, PlanSpec, RegistrationSpec, RunSpec, TopLevel)


def markdown_reference() -> str:
    """The key reference of the config, as Markdown (for configs/README.md)."""
    parts = [
        _schema.markdown_reference(TopLevel, "top level", title="top level"),
        _schema.markdown_reference(CampaignSpec, "campaign"),
        _schema.markdown_reference(OrthotropicSpec, "materials.NAME", title="materials.NAME (orthotropic ply)"),
        _schema.markdown_reference(IsotropicSpec, "materials.NAME", title="materials.NAME (isotropic)"),
        _schema.markdown_reference(LaminateSpec, "laminate", title="laminate and laminates.NAME"),
        _schema.markdown_reference(RunSpec, "run", title="[[run]]"),
        _schema.markdown_reference(RegistrationSpec, "registration"),
        _schema.markdown_reference(DiagnosisSpec, "diagnosis"),
        _schema.markdown_reference(ComputeSpec, "compute"),
        _schema.markdown_reference(OutputSpec, "output"),
        _schema.markdown_reference(PlanSpec, "plan"),
    ]
    return "\n".join(parts)
