"""What became of a run and of a campaign."""

from __future__ import annotations

import dataclasses
from pathlib import Path

__all__ = ["RunOutcome", "CampaignOutcome"]


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
                # registration warnings change what the verdict means: shown here, not only in the report
                lines += [f"          warning ({w['code']}): {w['message']}"
                          for w in _registration_warnings(r) if (w["code"], w["message"]) not in shared]
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
        sets = [{(w["code"], w["message"]) for w in _registration_warnings(r)} for r in done]
        return sorted(set.intersection(*sets))


def _registration_warnings(outcome):
    # registration warnings change what the verdict means: shown in the terminal, not only the report
    return [w for w in (outcome.summary or {}).get("warnings", ()) if w["code"].startswith("registration")]
