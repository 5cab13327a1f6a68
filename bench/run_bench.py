"""Run every benchmark and write the figures to bench/results/.

Each ``bench/bench_*.py`` module exposes one function ``bench_<name>(tmpdir) -> dict`` (or
``bench_<name>()``) returning named figures. Results go to ``results/bench.json`` (all
figures) and ``results/bench.md`` (a table), both written atomically. Timings are wall
clock on this machine; the machine and date are recorded beside them.
"""

from __future__ import annotations

import argparse
import importlib
import inspect
import json
import platform
import sys
import tempfile
import time
from datetime import UTC, datetime
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from hsat.outputs import atomic_write_text  # noqa: E402


def _discover() -> list[str]:
    return sorted(p.stem for p in HERE.glob("bench_*.py"))


def _run_one(module_name: str) -> dict:
    module = importlib.import_module(module_name)
    func = getattr(module, module_name)
    started = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix=f"hsat-{module_name}-") as tmp:
        figures = func(Path(tmp)) if inspect.signature(func).parameters else func()
    figures["bench_wall_s"] = round(time.perf_counter() - started, 2)
    return figures


def _as_markdown(results: dict[str, dict], meta: dict) -> str:
    lines = [
        "# hsat benchmark results",
        "",
        f"Run {meta['when']} on {meta['machine']} (Python {meta['python']}).",
        "",
        "| benchmark | figure | value |",
        "|---|---|---|",
    ]
    for name, figures in results.items():
        for key, value in figures.items():
            lines.append(f"| {name} | {key} | {value} |")
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=HERE / "results")
    parser.add_argument("--only", nargs="*", help="benchmark module names, e.g. bench_read")
    args = parser.parse_args(argv)
    names = args.only or _discover()
    results: dict[str, dict] = {}
    failed = False
    for name in names:
        print(f"bench: {name} ...", flush=True)
        try:
            results[name] = _run_one(name)
        except Exception as exc:  # report and go on: one broken bench must not hide the rest
            failed = True
            results[name] = {"error": f"{type(exc).__name__}: {exc}"}
        for key, value in results[name].items():
            print(f"  {key}: {value}", flush=True)
    meta = {
        "when": datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC"),
        "machine": f"{platform.machine()} {platform.processor() or ''}".strip(),
        "python": platform.python_version(),
    }
    args.out.mkdir(parents=True, exist_ok=True)
    atomic_write_text(args.out / "bench.json", json.dumps({"meta": meta, "results": results},
                                                          indent=2), mode=0o644)
    atomic_write_text(args.out / "bench.md", _as_markdown(results, meta), mode=0o644)
    print(f"bench: results in {args.out}/bench.md")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
