"""What became of a run and of a campaign."""

from __future__ import annotations

import dataclasses
from pathlib import Path

__all__ = ["RunOutcome", "CampaignOutcome", "timing_line"]

# steps shorter than this are left out of the terminal line (summary.json has them all)
_SHOWN_SECONDS = 0.05


def timing_line(timings: dict | None) -> str | None:
    """The steps of a run in one line (``correlation 3.1 s, lock-in 0.4 s, ...``), or None.

    ``timings`` is summary.json's ``timings``: the steps in run order, then what no step claims.
    """
    if not isinstance(timings, dict) or not isinstance(timings.get("steps"), dict):
        return None
    parts = [(name, s) for name, s in timings["steps"].items() if isinstance(s, (int, float))]
    parts.append(("other", timings.get("other")))
    shown = [f"{name} {s:.1f} s" for name, s in parts if isinstance(s, (int, float)) and s >= _SHOWN_SECONDS]
    return ", ".join(shown) or None


@dataclasses.dataclass
class RunOutcome:
    """What became of one run: ``status`` is "done", "skipped" or "failed".

    ``digests`` holds the input digests the run's process computed (for the output
    folder's digest cache, kept by the campaign process).
    """

    name: str
    status: str
    folder: Path | None = None
    error: str | None = None
    seconds: float = 0.0
    summary: dict | None = None
    digests: dict | None = None
    compiled: int = 0          # numeric kernels compiled (not loaded from the cache) by this run


@dataclasses.dataclass
class CampaignOutcome:
    """What became of a campaign."""

    out: Path
    runs: list
    report: Path | None = None
    frequency: Path | None = None
    campaign_errors: list = dataclasses.field(default_factory=list)
    bands: list = dataclasses.field(default_factory=list)     # one sentence per swept specimen

    @property
    def ok(self) -> bool:
        return all(r.status != "failed" for r in self.runs) and not self.campaign_errors

    def describe(self) -> str:
        lines = []
        shared = self._shared_warnings()
        for r in self.runs:
            if r.status == "failed":
                lines.append(f"  FAILED  {r.name}: {r.error}")
            elif r.status == "skipped":
                lines.append(f"  skipped {r.name} (unchanged since its last result; --overwrite recomputes)")
            else:
                verdict = (r.summary or {}).get("verdict", "")
                lines.append(f"  done    {r.name} ({r.seconds:.1f} s){': ' + verdict if verdict else ''}")
                steps = timing_line((r.summary or {}).get("timings"))
                if steps:
                    first = (f" (includes compiling {r.compiled} numeric kernel{'s' if r.compiled > 1 else ''} "
                             "on first use; cached for later runs)" if r.compiled else "")
                    lines.append(f"          time: {steps}{first}")
                # warnings that change what the verdict means: shown here, not only in the report
                lines += [f"          warning ({w['code']}): {w['message']}"
                          for w in _verdict_warnings(r) if (w["code"], w["message"]) not in shared]
        # a warning every finished run shares (the same control points, say) is said once
        lines += [f"  warning ({code}) in every run: {message}" for code, message in shared]
        for e in self.campaign_errors:
            lines.append(f"  FAILED  campaign: {e}")
        n_fail = sum(r.status == "failed" for r in self.runs)
        head = (f"{len(self.runs) - n_fail} of {len(self.runs)} runs ok" if self.runs else "no runs")
        lines.insert(0, f"fusion: {head}; results in {self.out}")
        if self.frequency:
            lines.append(f"  frequency sweep fit: {self.frequency}")
        lines.extend(f"    {b}" for b in self.bands)
        if self.report:
            lines.append(f"  report: {self.report}")
        return "\n".join(lines)

    def _shared_warnings(self) -> list:
        done = [r for r in self.runs if r.status == "done"]
        if len(done) < 2:
            return []
        sets = [{(w["code"], w["message"]) for w in _verdict_warnings(r)} for r in done]
        return sorted(set.intersection(*sets))


def _verdict_warnings(outcome):
    # registration warnings, a weak thermal signal and a reversed sign change what the verdict
    # means: shown in the terminal, not only the report
    return [w for w in (outcome.summary or {}).get("warnings", ())
            if w["code"].startswith("registration") or w["code"] in ("low_snr", "sign_reversed")]
