"""Benchmarks of the hot paths (``fusion bench``): ratios measured in one run.

Speed targets are checked here, never in timed tests (machines are shared and
noisy). Each benchmark module returns a flat dict; :func:`run_benchmarks`
merges them into the object ``fusion bench --json`` prints, with the keys
``lockin_f32_ratio``, ``lockin_i16_ratio``, ``dic_subsets_per_s``,
``dic_points_per_s``, ``dic_flow_seconds``, ``predict_ratio``, ``heat_seconds``,
``campaign_speedup`` and ``cores`` always present (null where a benchmark was
not run or is not available), and extras such as ``lateral_fft_ratio``.

At quick sizes (``--quick``, a smoke test) fixed costs dominate every ratio against a
reference pass: only rates and seconds are reported (ratios and speed-ups are null),
no target is judged, and the benchmarks that only mean something at full size
(:data:`FULL_ONLY`) are skipped unless named with ``--only``.
"""

from __future__ import annotations

import importlib
import logging
import os
import time

log = logging.getLogger(__name__)

__all__ = ["run_benchmarks", "format_table", "REQUIRED_KEYS", "FULL_ONLY"]

REQUIRED_KEYS = ("lockin_f32_ratio", "lockin_i16_ratio", "dic_subsets_per_s", "dic_points_per_s",
                 "dic_flow_seconds", "predict_ratio", "heat_seconds", "campaign_speedup", "cores")

# name -> (module, function)
_BENCHES = {
    "predict": ("fusion.bench._predict", "bench_predict"),
    "heat": ("fusion.bench._heat", "bench_heat"),
    "lateral": ("fusion.bench._lateral", "bench_lateral"),
    "lockin": ("fusion.bench._lockin", "bench_lockin"),
    "dic": ("fusion.bench._dic", "bench_dic"),
    "campaign": ("fusion.bench._campaign", "bench_campaign"),
    "run_realistic": ("fusion.bench._realistic", "bench_realistic"),
}

#: Benchmarks run only at full sizes (or when named): a whole campaign or run, whose start-up
#: costs swamp a quick size.
FULL_ONLY = ("campaign", "run_realistic")

READING = ("reading: a *_ratio is a time over a reference measured in the same process on the same data "
           "(lower is better; 1 = as fast as the reference); *_per_s and *_speedup: higher is better")

_TARGETS = {
    "lockin_f32_ratio": ("<=", 1.2, "time of the lock-in / one parallel read of the float32 stack"),
    "lockin_i16_ratio": ("<=", 1.6, "time of the lock-in on int16 counts / one parallel read of them"),
    "dic_subsets_per_s": (">=", 20000, "IC-GN subsets per second (21 px subsets)"),
    "dic_points_per_s": (">=", 15000, "correlation points per second end to end"),
    "dic_flow_seconds": (None, None, "OpenCV dense optical flow on the same pair, s"),
    "predict_ratio": ("<=", 20, "predictions of every source / one numpy pass, 1e6 pixels"),
    "heat_seconds": ("<=", 1.0, "transfer coefficients, 200 frequencies, 32 plies, s"),
    "lateral_fft_ratio": ("<=", 10, "lateral heat model, one frequency, 512 x 640 px, 16 plies / one "
                          "complex 2-D FFT on its padded grid"),
    "lateral_seconds": (None, None, "lateral heat model, one frequency, 512 x 640 px, 16 plies, s"),
    "lateral_fft_seconds": (None, None, "one complex 2-D FFT on the padded grid, s"),
    "lateral_grid": (None, None, "padded grid of the lateral model, rows x columns"),
    "campaign_speedup": (">=", 1.3, "demo-sized runs as fresh `fusion run` commands: 2 workers vs 1"),
    "run_overhead_ratio": ("<=", 1.5, "realistic run in-process / its compute core (lock-in + correlation)"),
    "run_cli_ratio": ("<=", 2.0, "the same run as `fusion run` (wall clock) / its compute core"),
    "run_seconds": (None, None, "realistic run in-process, s"),
    "run_core_seconds": (None, None, "its compute core: lock-in pass + correlation, s"),
    "run_cli_seconds": (None, None, "`fusion run` of it, wall clock, s"),
    "run_peak_rss_mb": (None, None, "peak resident memory of that `fusion run`, MB"),
    "run_memory_limit_mb": (None, None, "memory budget + per-worker baseline the planner counts, MB"),
}


def _quick_meaningless(key: str) -> bool:
    """A measure that at quick sizes says more about fixed costs than about the code."""
    return "_ratio" in key or key.endswith("_speedup")


def run_benchmarks(*, quick: bool = False, only=None) -> dict:
    """Run the benchmarks (all, or those named in ``only``) and return one flat dict."""
    out = {k: None for k in REQUIRED_KEYS}
    out["cores"] = os.cpu_count()
    out["quick"] = bool(quick)
    names = list(only) if only else [n for n in _BENCHES if not (quick and n in FULL_ONLY)]
    unknown = [n for n in names if n not in _BENCHES]
    if unknown:
        from ..errors import ConfigError

        raise ConfigError("--only", f"unknown benchmark {unknown[0]!r}; choose from {sorted(_BENCHES)}")
    for name in names:
        mod_name, fn_name = _BENCHES[name]
        t0 = time.perf_counter()
        try:
            fn = getattr(importlib.import_module(mod_name), fn_name)
        except (ImportError, AttributeError) as e:
            log.warning("benchmark %s not available: %s", name, e)
            continue
        out.update(fn(quick=quick))
        log.info("benchmark %s took %.1f s", name, time.perf_counter() - t0)
    if quick:
        for k in [k for k in out if _quick_meaningless(k)]:
            if k in REQUIRED_KEYS:
                out[k] = None
            else:
                del out[k]
    return out


def format_table(results: dict) -> str:
    """The benchmark results as a plain-text table with their targets."""
    quick = bool(results.get("quick"))
    width = max([len("measure")] + [len(k) for k in results])
    lines = [f"fusion bench on {results.get('cores')} cores{' (quick sizes)' if quick else ''}"]
    if quick:
        lines.append("quick sizes: rates and seconds only, no target judged (fixed costs dominate every ratio "
                     "at this size); `fusion bench` measures the full sizes against the targets")
    lines += [READING, f"{'measure':<{width}} {'value':>12}  {'target':>10}  meaning"]
    for k, v in results.items():
        if k in ("cores", "quick") or (quick and v is None):
            continue
        if isinstance(v, dict):
            lines.append(f"{k}:")
            lines += [f"  {name:<{width - 2}} {_short(x):>12}" for name, x in _flat(v)]
            continue
        op, target, meaning = _TARGETS.get(k, (None, None, ""))
        if quick:
            op = None
        val = "n/a" if v is None else f"{v:.4g}" if isinstance(v, float) else str(v)
        tgt = f"{op} {target:g}" if op else ""
        flag = ""
        if op and isinstance(v, (int, float)):
            flag = "  ok" if (v <= target if op == "<=" else v >= target) else "  MISSED"
        lines.append(f"{k:<{width}} {val:>12}  {tgt:>10}  {meaning}{flag}".rstrip())
    return "\n".join(lines)


def _flat(d: dict, prefix: str = ""):
    for k, v in d.items():
        if isinstance(v, dict):
            yield from _flat(v, f"{prefix}{k}.")
        else:
            yield f"{prefix}{k}", v


def _short(v) -> str:
    return "n/a" if v is None else f"{v:.4g}" if isinstance(v, float) else str(v)
