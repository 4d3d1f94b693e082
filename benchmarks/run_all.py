"""Run every benchmark, write ``benchmarks/results.json`` and the table in ``docs/performance.md``.

Usage::

    python benchmarks/run_all.py                 # items 1-5 and 7 + profiles, < 10 min on 2 cores
    python benchmarks/run_all.py --throughput    # also item 6, the 1,600-variant study
    python benchmarks/run_all.py --only rays series

Each benchmark runs in its own subprocess (fresh memory, one BLAS thread like
a Dask worker slot; the sweep benchmarks start their own LocalCluster). Every
figure is a ratio of two times measured in the same subprocess, back to back,
because the machines are shared and noisy; the one-minute load average before
and after each figure is recorded beside it. Benchmarks that are not re-run
keep their previous entry in ``results.json``.

Not part of the test suite.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import bench_common as bc

HERE = Path(__file__).resolve().parent
RESULTS = HERE / "results.json"
DOC = bc.REPO / "docs" / "performance.md"
START, END = "<!-- results:start -->", "<!-- results:end -->"

# name -> (script, needs the shared cache, single BLAS thread)
BENCHMARKS: dict[str, tuple[str, bool, bool]] = {
    "rays": ("bench_rays.py", False, True),
    "series": ("bench_series.py", True, True),
    "reuse": ("bench_reuse.py", True, True),
    "bruteforce": ("bench_bruteforce.py", False, True),
    "sweep": ("bench_sweep.py", False, False),
    "profile": ("bench_profile.py", True, True),
}


def run_one(name: str, cache: Path, work: Path, throughput: bool) -> tuple[dict[str, Any], float]:
    script, shared_cache, single = BENCHMARKS[name]
    out = work / f"{name}.json"
    cmd = [sys.executable, str(HERE / script), "--json", str(out)]
    if shared_cache:
        cmd += ["--cache", str(cache)]
    if name == "sweep" and throughput:
        cmd.append("--throughput")
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True, cwd=bc.REPO,
                          env=bc.single_thread_env() if single else None, check=False)
    seconds = time.perf_counter() - t0
    if proc.returncode != 0:
        raise RuntimeError(f"benchmark {name} failed ({proc.returncode}):\n{proc.stderr[-4000:]}")
    return json.loads(out.read_text(encoding="utf-8")), seconds


# ---------------------------------------------------------------------------
# the table


def _f(x: float, digits: int = 2) -> str:
    return f"{x:.{digits}f}"


def _met(flag: bool | None) -> str:
    return "—" if flag is None else ("yes" if flag else "**no**")


def _load(entry: dict[str, Any]) -> str:
    lo = entry.get("load_average")
    return f"{lo[0]:.1f}–{lo[1]:.1f}" if lo else ""


def table(results: dict[str, Any]) -> str:
    rows = ["| # | figure | measured | goal | met | load (1 min) |",
            "|---|---|---|---|---|---|"]
    b = results.get("benchmarks", {})
    if "rays" in b:
        r = b["rays"]
        rows.append(
            f"| 1 | ray kernel efficiency: coefficient stage rays/s ÷ raw embreex rays/s | "
            f"{_f(r['ratio'])} ({_f(r['ours_mrays_per_s'])} vs {_f(r['raw_mrays_per_s'])} "
            f"Mrays/s; {r['rays'] / 1e6:.1f} M rays in {_f(r['coefficient_seconds'], 1)} s; "
            f"{100 * r['share_of_time_in_scene_queries']:.0f} % of it in Embree queries) | "
            f"≥ 0.5 | {_met(r['met'])} | {_load(r)} |")
    if "series" in b:
        s = b["series"]["series"]
        st = s["stage_seconds"]
        rows.append(
            f"| 2 | series efficiency: (sky + illuminance + metrics) ÷ bare matmuls "
            f"(12 orientations, 15 min, MF2, 3 glazings) | {_f(s['ratio'], 1)} "
            f"(sky {_f(st['sky'], 1)} s, illuminance {_f(st['illuminance'], 1)} s, metrics "
            f"{_f(st['metrics'], 1)} s vs matmuls {_f(s['bare_matmul_seconds'], 2)} s; with "
            f"load + write {_f(s['ratio_with_load_and_write'], 1)}) | ≤ 1.5 | {_met(s['met'])} "
            f"| {_load(s)} |")
    if "reuse" in b:
        r = b["reuse"]
        for k, label in (("orientation", "orientation"), ("glazing_variant", "glazing variant"),
                         ("climate", "climate")):
            rows.append(
                f"| 3 | reuse: one more {label} ÷ one coefficient set | {r['ratio'][k]:.4f} "
                f"({r['marginal_seconds'][k]:.3f} s / {_f(r['coefficient_seconds'], 1)} s) | "
                f"≤ 0.01 | {_met(r['met'][k])} | {_load(r)} |")
    if "bruteforce" in b:
        r = b["bruteforce"]
        e = r["relative_error"]["total"]
        bf = r["brute_force"]
        rows.append(
            f"| 4 | brute force (direct only, extrapolated from {bf['hours_traced']} h) ÷ "
            f"coefficient route, a year hourly | {_f(r['ratio'], 0)} "
            f"({_f(bf['seconds_year_extrapolated'], 0)} s vs "
            f"{_f(r['route_seconds']['total'], 1)} s); direct illuminance difference mean "
            f"{100 * e['mean']:.1f} %, P95 {100 * e['p95']:.1f} % (reference noise mean "
            f"{100 * r['brute_force_noise_relative']['mean']:.1f} %) | — | — | {_load(r)} |")
    if "sweep" in b:
        sc = b["sweep"]["scaling"]
        pj = sc["projection"]["wall_seconds"]
        rows.append(
            f"| 5 | scaling: 64-variant sweep, wall(1 worker) ÷ wall(2 workers) | "
            f"{_f(sc['ratio'])} ({_f(sc['runs'][0]['wall_seconds'], 1)} s vs "
            f"{_f(sc['runs'][1]['wall_seconds'], 1)} s; the machine gave two processes "
            f"{_f(sc['machine_speedup'])}× at the time); projected "
            + ", ".join(f"{n} workers {_f(v, 1)} s" for n, v in pj.items())
            + f" | ideal 2 | — | {_load(sc['runs'][1])} |")
        if "throughput" in b["sweep"]:
            tp = b["sweep"]["throughput"]
            rr = tp["run"]
            rows.append(
                f"| 6 | sweep throughput: 1,600 variants on 2 workers | "
                f"{_f(rr['variants_per_second'], 1)} variants/s, {_f(rr['wall_seconds'], 0)} s "
                f"| < 600 s | {_met(tp['met'])} | {_load(rr)} |")
    if "series" in b:
        m = b["series"]["memory"]
        h, q = m["runs"]
        rows.append(
            f"| 7 | worker memory: peak RSS of the series stage, 35,040 vs 8,760 steps | "
            f"{_f(m['peak_ratio'])} ({_f(q['peak_rss_mib'], 0)} vs {_f(h['peak_rss_mib'], 0)} "
            f"MiB; series 4× longer; unchunked would need "
            f"{_f(m['unchunked_series_mib_15min'], 0)} MiB more) | bounded (≪ 4) | "
            f"{_met(m['met'])} | |")
    return "\n".join(rows)


def write_doc(results: dict[str, Any]) -> None:
    block = (f"{START}\n_Generated by `python benchmarks/run_all.py` on "
             f"{results['when']} ({results['environment']['cpus']} CPUs, load "
             f"{results['environment']['load_average_1min_at_start']:.1f} at start; "
             f"run_all took {results.get('seconds', 0):.0f} s)._\n\n{table(results)}\n{END}")
    if DOC.exists():
        text = DOC.read_text(encoding="utf-8")
        if START in text and END in text:
            head, rest = text.split(START, 1)
            _, tail = rest.split(END, 1)
            DOC.write_text(head + block + tail, encoding="utf-8")
            return
    DOC.parent.mkdir(parents=True, exist_ok=True)
    DOC.write_text(f"# Performance\n\n{block}\n", encoding="utf-8")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--only", nargs="+", choices=list(BENCHMARKS), help="run only these")
    parser.add_argument("--throughput", action="store_true",
                        help="include the 1,600-variant throughput study (item 6)")
    args = parser.parse_args()
    names = args.only or list(BENCHMARKS)
    results: dict[str, Any] = {}
    if RESULTS.exists():
        results = json.loads(RESULTS.read_text(encoding="utf-8"))
    results.setdefault("benchmarks", {})
    results["environment"] = bc.environment()
    results["when"] = dt.datetime.now(dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    t0 = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="luxsweep-bench-") as tmp:
        work = Path(tmp)
        for name in names:
            print(f"[{time.perf_counter() - t0:6.0f} s] {name} ...", flush=True)
            entry, seconds = run_one(name, work / "cache", work, args.throughput)
            entry["benchmark_seconds"] = seconds
            if name == "sweep" and not args.throughput:
                old = results["benchmarks"].get("sweep", {}).get("throughput")
                if old is not None:
                    entry["throughput"] = old
            results["benchmarks"][name] = entry
            RESULTS.write_text(json.dumps(results, indent=1), encoding="utf-8")
    results["seconds"] = time.perf_counter() - t0
    RESULTS.write_text(json.dumps(results, indent=1), encoding="utf-8")
    write_doc(results)
    print(table(results))
    print(f"total {results['seconds']:.0f} s; wrote {RESULTS} and {DOC}")


if __name__ == "__main__":
    main()
