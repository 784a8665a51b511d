"""Benchmark: a campaign of demo-sized runs on two local workers against one by one."""

from __future__ import annotations

import re
import shutil
import tempfile
import time
from pathlib import Path

__all__ = ["bench_campaign", "campaign_config"]

# demo runs whose inputs are frame stacks and imported strain (the common case)
_TEMPLATE_RUNS = ("CQ-0p05Hz", "CX-2Hz", "GP-0p05Hz", "CQ-150Hz")


def campaign_config(data_folder: Path, n_runs: int) -> str:
    """A config of ``n_runs`` copies of demo runs (figures and report off), as TOML text."""
    text = (data_folder / "demo.toml").read_text()
    head, *blocks = re.split(r"(?m)^\[\[run\]\]\s*$", text)
    by_name = {re.search(r'name = "([^"]+)"', b).group(1): b for b in blocks}
    head = head.replace("figures = true", "figures = false")
    head = re.sub(r"(?m)^\[output\]", "[output]\nreport = false", head, count=1)
    out = [head]
    for i in range(n_runs):
        name = _TEMPLATE_RUNS[i % len(_TEMPLATE_RUNS)]
        block = by_name[name].replace(f'name = "{name}"', f'name = "{name}-copy{i}"', 1)
        block = block.replace(f'specimen = "{name[:2]}"', f'specimen = "{name[:2]}-copy{i}"', 1)
        out.append("[[run]]" + block)
    return "".join(out)


def bench_campaign(*, quick: bool = False) -> dict:
    """Wall time of ``n`` runs processed one by one and on two local worker processes.

    Returns ``campaign_speedup`` (sequential time / parallel time, same runs, same
    machine, measured in this call), ``campaign_runs`` and both times in seconds.
    """
    from ..demo import generate
    from ..pipeline import run_campaign

    n = 4 if quick else 8
    data = generate().parent
    tmp = Path(tempfile.mkdtemp(prefix="fusion-bench-"))
    try:
        cfg = data / f".bench-campaign-{n}.toml"
        cfg.write_text(campaign_config(data, n))
        # warm the compilation caches so neither timing pays for it
        run_campaign(cfg, out=tmp / "warm", only=[f"{_TEMPLATE_RUNS[0]}-copy0"], workers=1)
        t0 = time.perf_counter()
        seq = run_campaign(cfg, out=tmp / "seq", workers=1)
        t_seq = time.perf_counter() - t0
        t0 = time.perf_counter()
        par = run_campaign(cfg, out=tmp / "par", workers=2, scheduler="processes")
        t_par = time.perf_counter() - t0
        ok = seq.ok and par.ok
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return {"campaign_speedup": (t_seq / t_par) if ok else None, "campaign_runs": n,
            "campaign_sequential_s": t_seq, "campaign_parallel_s": t_par}
