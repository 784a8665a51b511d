"""A campaign: every ``[[run]]`` of a config processed into an output folder, safely.

:func:`run_campaign` processes the runs of a config (one task per run, on local
worker processes or a Dask cluster), publishes each run's folder whole or not at
all, skips runs whose inputs and settings are unchanged, keeps going when a run
fails, and then writes the campaign products (``report.html``, and
``frequency.nc`` for specimens tested at two or more frequencies).
:func:`check_campaign` validates a config and its inputs without processing.

Public names
------------
run_campaign, check_campaign
    The ``fusion run`` and ``fusion check`` commands as functions.
process_run
    One run of a config into its folder (what a worker does).
RunOutcome, CampaignOutcome
    What became of a run and of a campaign.
run_stamp
    The hash of everything that determines a run's result.
campaign_lock, LOCK_NAME
    The exclusive lock of an output folder.
mark_folder, is_marked_folder, publish, recover, foreign_message, build_marked
    What in a folder is fusion's: the marker of a folder it made, publishing such a
    folder in place of fusion's old one, putting back what a crash left, and the
    sentence that refuses anything else; build_marked makes such a folder whole or not at all.
watch_campaign, refresh_products
    ``fusion watch``: each run processed as soon as its inputs are complete; the campaign
    products rebuilt from the result folders on disk.
"""

from ._campaign import check_campaign, run_campaign
from ._folders import (LOCK_NAME, build_marked, campaign_lock, foreign_message, is_marked_folder, mark_folder,
                       publish, recover)
from ._outcome import CampaignOutcome, RunOutcome
from ._process import process_run
from ._provenance import run_stamp
from ._watch import refresh_products, watch_campaign

__all__ = ["CampaignOutcome", "LOCK_NAME", "RunOutcome", "build_marked", "campaign_lock", "check_campaign",
           "foreign_message", "is_marked_folder", "mark_folder", "process_run", "publish", "recover", "refresh_products",
           "run_campaign", "run_stamp", "watch_campaign"]
