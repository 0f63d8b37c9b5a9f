"""Wall time of `prespec demo`, split into its phases: lock, data, statistics, report (figures,
notebook, HTML), against papermill executing an empty notebook in the same run.

Each phase is timed by wrapping the function that does it, wherever prespec has bound it (the
module that defines it and every module that imported it by name), so a function that moves
keeps its timer. The sum of the phases is compared with the whole demo's time in the same run
(the ratio shows how much the split leaves out: results.json, hashing, the log, the folder).
Every phase must be timed once per demo and the phases cannot add up to more than the whole;
if a refactoring renames or bypasses one of the functions below, the benchmark stops with the
phase it lost instead of printing a split that leaves it out. The figures are drawn while the
notebook's kernel starts (``publish.FIGURES_WITH_KERNEL``), so the report's parts overlap and
add up to more than the report; the kernel itself is started with the run, before the data are
read (``render.KernelAhead``), so "notebook execution" counts from the hand-over of a running
kernel to the end of the cells, and the report's time is what a user waits for.

The baseline: papermill executing a notebook without cells, with the same kernel (this
interpreter's ipykernel, without the imports the report's kernel makes as it starts), once
before each demo. The goal of issue 18: the demo's report within 1.5 times that baseline.

    .venv/bin/python bench/demo_phases.py [--repeat 3]
    .venv/bin/python bench/demo_phases.py --smoke        # one demo
    .venv/bin/python bench/demo_phases.py --sequential   # the figures first, then the notebook
"""

from __future__ import annotations

import argparse
import importlib
import statistics
import sys
import tempfile
import time
from collections import defaultdict
from collections.abc import Callable
from pathlib import Path
from typing import Any

# (label, module, function). A "  " label is a part of the phase above it, not added to the sum.
PHASES = [
    ("lock", "prespec.api", "lock"),
    ("data: read and reduce to counts", "prespec.data.engines.pipeline", "count_source"),
    ("  of which mapping and population", "prespec.data.prepare", "prepare"),
    ("statistics", "prespec.analysis.hypotheses", "analyse"),
    ("report (tables, figures, notebook, HTML, manifest)", "prespec.workflow.publish",
     "build_report"),
    ("  figures", "prespec.report.figures", "write_figures"),
    ("  notebook execution (papermill)", "prespec.report.render", "_execute"),
    ("  HTML export (nbconvert)", "prespec.report.render", "_to_html"),
]
REPORT = PHASES[4][0]
WHOLE = "whole demo (in process)"
EMPTY = "baseline: papermill, empty notebook"

timings: dict[str, list[float]] = defaultdict(list)


def timed(name: str, fn: Callable[..., Any]) -> Callable[..., Any]:
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        start = time.perf_counter()
        try:
            return fn(*args, **kwargs)
        finally:
            timings[name].append(time.perf_counter() - start)
    return wrapper


def wrap_everywhere(label: str, module: str, name: str) -> int:
    """Replace the function ``module.name`` by its timed wrapper in every loaded prespec module
    that holds it; the number of bindings replaced."""
    original = getattr(importlib.import_module(module), name)
    wrapper = timed(label, original)
    replaced = 0
    for mod_name, mod in list(sys.modules.items()):
        if mod_name.split(".")[0] != "prespec" or mod is None:
            continue
        for attr, value in list(vars(mod).items()):
            if value is original:
                setattr(mod, attr, wrapper)
                replaced += 1
    return replaced


def install() -> None:
    # every module on the demo's path loaded first, so their imported names are wrapped too
    for module in ("prespec.api", "prespec.workflow.execute", "prespec.workflow.publish",
                   "prespec.report", "prespec.data.engines.pipeline"):
        importlib.import_module(module)
    for label, module, name in PHASES:
        wrap_everywhere(label, module, name)


def check(repeats: int) -> None:
    """Every phase timed once per demo; the top-level phases within the whole."""
    lost = [label for label, _, _ in PHASES if len(timings[label]) != repeats]
    if lost:
        raise SystemExit("phases not timed once per demo (renamed or bypassed?): "
                         + "; ".join(f"{label.strip()} ({len(timings[label])} times)"
                                     for label in lost))
    for k in range(repeats):
        top = sum(timings[label][k] for label, _, _ in PHASES if not label.startswith(" "))
        if top > timings[WHOLE][k]:
            raise SystemExit(f"demo {k + 1}: the phases add up to {top:.3f} s, more than the "
                             f"whole {timings[WHOLE][k]:.3f} s (a phase counted twice?)")


def empty_notebook(folder: Path) -> None:
    """Time papermill executing a notebook without cells, with the report's kernel manager."""
    import nbformat
    import papermill

    from prespec.report import render

    options = render._kernel_options(render.KERNEL)
    options.pop("extra_arguments", None)  # the report's kernel also imports what cells need
    start = time.perf_counter()
    papermill.execute_notebook(nbformat.v4.new_notebook(), str(folder / "empty.ipynb"),
                               kernel_name=render.KERNEL, progress_bar=False,
                               log_output=False, **options)
    timings[EMPTY].append(time.perf_counter() - start)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--smoke", action="store_true", help="one demo")
    parser.add_argument("--sequential", action="store_true",
                        help="draw the figures first, then run the notebook")
    args = parser.parse_args()
    repeats = 1 if args.smoke else args.repeat
    install()
    from prespec import api
    from prespec.workflow import publish

    publish.FIGURES_WITH_KERNEL = not args.sequential
    for _ in range(repeats):
        with tempfile.TemporaryDirectory() as tmp:
            empty_notebook(Path(tmp))
            start = time.perf_counter()
            page = api.demo(Path(tmp) / "demo")
            timings[WHOLE].append(time.perf_counter() - start)
            if not page.is_file():
                raise SystemExit(f"the demo wrote no report: {page}")
    check(repeats)
    whole = statistics.median(timings[WHOLE])
    width = max(len(label) for label, _, _ in PHASES)
    print(f"{repeats} demo(s); median of each phase and its share of the whole demo")
    for label, _, _ in PHASES:
        med = statistics.median(timings[label])
        print(f"{label:<{width}}  {med * 1000:8.1f} ms  {med / whole:6.1%}")
    top = statistics.median(
        [sum(timings[label][k] for label, _, _ in PHASES if not label.startswith(" "))
         for k in range(repeats)])
    print(f"{'phases together':<{width}}  {top * 1000:8.1f} ms  {top / whole:6.1%}")
    print(f"{WHOLE:<{width}}  {whole * 1000:8.1f} ms  {1:6.1%}")
    empty = statistics.median(timings[EMPTY])
    ratio = statistics.median(r / e for r, e in zip(timings[REPORT], timings[EMPTY], strict=True))
    print(f"{EMPTY:<{width}}  {empty * 1000:8.1f} ms")
    print(f"report / empty notebook (median of the runs' ratios): {ratio:.2f} "
          f"(goal: at most 1.50; figures {'first' if args.sequential else 'beside the kernel'})")
    # what one command pays: its only demo loads matplotlib and nbconvert (the medians above
    # are of demos that find them loaded)
    print(f"first demo of the process (loads matplotlib and nbconvert): report "
          f"{timings[REPORT][0] * 1000:.1f} ms, {timings[REPORT][0] / timings[EMPTY][0]:.2f} "
          f"times its empty notebook")


if __name__ == "__main__":
    main()
