"""Frequency plan of a laminate: which layer the camera sees at which loading frequency.

``fusion plan CONFIG`` computes, for the configured laminate and strain state and without
any measured data, the surface response of the through-thickness heat model from 0.1 to
200 Hz (log spaced): the in-phase dT/T0 (what the lock-in's signed ratio measures), its
modulus and phase lag, the adiabatic value of every candidate source beside it, the
thermal diffusion length of every layer, the contribution of each layer to the in-phase
response and the band in which the response stays within a tolerance (2 % by default)
of each source, and how far heat flowing along the surface blurs stress gradients (the
in-plane diffusion lengths along and across the surface ply's fibres, and the shortest
wavelength of a strain variation the surface response still passes at half contrast). It
writes ``plan.nc`` and ``plan.png`` into the output folder (replacing its own earlier plan,
never another file) and prints a short table.

The plan is a model estimate to help choose loading frequencies; it supports engineering
judgement and does not replace the laboratory's procedures, the applicable test standards
or a qualified engineer's review of the loading programme. Test rigs under cyclic load are
hazardous.

Modules: ``_response`` (the heat model's response and bands, ``plan.nc``), ``_table`` (the
plain-text plan), ``_figure`` (``plan.png``), ``_command`` (``fusion plan``: config in,
files out), ``_gauge`` (``fusion gauge``: correlation settings).
"""

from ._command import plan_command, save_plan
from ._figure import plan_figure
from ._gauge import gauge_command, gauge_table
from ._response import PLAN_CAUTION, frequency_plan
from ._table import plan_table

__all__ = ["frequency_plan", "plan_table", "plan_figure", "save_plan", "plan_command", "PLAN_CAUTION",
           "gauge_table", "gauge_command"]
