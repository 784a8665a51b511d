"""Former home of the campaign functions, now in :mod:`fusion.campaign` (kept for one release)."""

from __future__ import annotations

import warnings

from . import campaign as _campaign

_MOVED = ("run_campaign", "check_campaign", "process_run", "CampaignOutcome", "RunOutcome", "run_stamp",
          "campaign_lock", "LOCK_NAME")

__all__ = list(_MOVED)


def __getattr__(name):
    if name in _MOVED:
        warnings.warn(f"fusion.pipeline.{name} moved to fusion.campaign.{name}; the old name goes in the "
                      "next release", DeprecationWarning, stacklevel=2)
        return getattr(_campaign, name)
    raise AttributeError(f"module 'fusion.pipeline' has no attribute {name!r}")
