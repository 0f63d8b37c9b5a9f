"""Every benchmark in bench/ runs in CI at its smoke size (``--smoke``), so none can rot: each
must finish, and the checks it makes at full size must hold at the small one (agreement with
scipy or statsmodels, identical decisions, the same counts). The assertions read the checks'
own lines from the output; times are printed by the benchmarks, never asserted here."""

from __future__ import annotations

import importlib.util
import re
import subprocess
import sys
from pathlib import Path
from types import ModuleType

import numpy as np
import pytest

BENCH = Path(__file__).resolve().parents[1] / "bench"



def smoke(script: str) -> str:
    """The benchmark's output at its smoke size; it must exit 0."""
    done = subprocess.run([sys.executable, str(BENCH / script), "--smoke"],
                          capture_output=True, text=True, timeout=300, check=False)
    assert done.returncode == 0, done.stdout + done.stderr
    return done.stdout


def numbers(pattern: str, text: str) -> list[float]:
    """Every number the groups of ``pattern`` capture in ``text``, in order (commas dropped)."""
    found = re.findall(pattern, text)
    flat = [x for m in found for x in (m if isinstance(m, tuple) else (m,))]
    return [float(x.replace(",", "")) for x in flat]


def test_every_benchmark_has_a_smoke_test_here() -> None:
    source = Path(__file__).read_text(encoding="utf-8")
    scripts = {p.name for p in BENCH.glob("*.py") if not p.name.startswith("_")}  # _: shared
    tested = set(re.findall(r'smoke\("([a-z_]+\.py)"\)', source))
    tested |= set(re.findall(r'BENCH / "([a-z_]+\.py)"\), "--smoke"', source))
    assert len(scripts) >= 10 and scripts <= tested, sorted(scripts - tested)


def test_the_wide_header_benchmark_runs_at_its_smoke_size() -> None:
    done = subprocess.run([sys.executable, str(BENCH / "wide_header.py"), "--smoke"],
                          capture_output=True, text=True, timeout=300, check=False)
    assert done.returncode == 0, done.stdout + done.stderr
    assert done.stdout.startswith("wide file: 2,000 columns, ")
    analysed = re.findall(r"analysed (\d+)", done.stdout)
    # the demo data: 601 rows, 19 outside the population, 1 unknown group (prespec.demo.wound)
    assert analysed == ["581", "581"], done.stdout
    assert "peak memory wide / narrow: " in done.stdout


def test_the_boundary_benchmark_agrees_with_the_fine_recursion() -> None:
    out = smoke("boundary_speed.py")
    rows = {m[0].strip(): float(m[2]) for m in
            re.findall(r"(?m)^(\d+ looks: [^\n]*?)\s+(\d+\.\d+)\s+(\S+)$", out)}
    assert len(rows) == 4, out
    for route, err in rows.items():
        # the naive grid of step 0.01 is a coarse baseline; the others match r = 64
        assert err <= (1e-3 if "naive" in route else 1e-6), (route, err)
    assert "naive uniform grid, step 0.01" in out
    assert "checked: the recursion and the multivariate normal route within 1e-06" in out


def test_the_coverage_benchmark_matches_the_library_and_the_plain_sum() -> None:
    out = smoke("coverage.py")
    limits, summed = numbers(r"max \|diff\| (\S+)", out)
    assert limits <= 1e-9 and summed <= 1e-12, out
    grid = re.findall(r"(?m)^\s+(10|30|100)\s+0\.\d\d\s+0\.\d\d\s+(.*)$", out)
    assert len(grid) == 18, out  # 3 sizes × 6 pairs of proportions
    assert all(0 < float(v) <= 1 for _, row in grid for v in row.split())
    methods = "wald|newcombe|agresti-caffo|miettinen-nurminen"
    means = {m: float(v) for m, v in re.findall(rf"(?m)^\s+({methods})\s+(\S+)", out)}
    assert "over 100 random points (n1, n2 uniform on 10..30" in out
    # common practice: the Wald interval covers well below its nominal 95 per cent with
    # groups this small, the other three close to it (Newcombe 1998, Table III; from memory)
    assert means["wald"] < 0.93
    for method in ("newcombe", "agresti-caffo", "miettinen-nurminen"):
        assert abs(means[method] - 0.95) < 0.01, (method, means[method])


def test_the_demo_phases_benchmark_times_every_phase() -> None:
    out = smoke("demo_phases.py")
    assert out.startswith("1 demo(s)")
    shares = dict(re.findall(r"(?m)^(\S.*?|  \S.*?)\s+[\d.]+ ms\s+([\d.]+)%$", out))
    assert set(shares) == {
        "lock", "data: read and reduce to counts", "  of which mapping and population",
        "statistics", "report (tables, figures, notebook, HTML, manifest)", "  figures",
        "  notebook execution (papermill)", "  HTML export (nbconvert)",
        "phases together", "whole demo (in process)"}, out
    assert float(shares["whole demo (in process)"]) == 100.0
    assert 0 < float(shares["phases together"]) <= 100.0
    assert re.search(r"(?m)^baseline: papermill, empty notebook\s+[\d.]+ ms$", out), out
    assert re.search(r"(?m)^report / empty notebook \(median of the runs' ratios\): [\d.]+ "
                     r"\(goal: at most 1\.50; figures beside the kernel\)$", out), out
    assert re.search(r"(?m)^first demo of the process \(loads matplotlib and nbconvert\): "
                     r"report [\d.]+ ms, [\d.]+ times its empty notebook$", out), out


def demo_phases_module() -> ModuleType:
    """bench/demo_phases.py loaded without running it (it wraps nothing until main)."""
    spec = importlib.util.spec_from_file_location("demo_phases_bench", BENCH / "demo_phases.py")
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_the_demo_phases_benchmark_stops_on_a_phase_it_lost() -> None:
    bench = demo_phases_module()
    for label, _, _ in bench.PHASES:
        if label != "statistics":  # as if analyse had moved and the run no longer met it
            bench.timings[label].append(0.01)
    bench.timings[bench.WHOLE].append(1.0)
    with pytest.raises(SystemExit, match=r"not timed once per demo .*: statistics \(0 times\)"):
        bench.check(1)


def test_the_demo_phases_benchmark_stops_on_phases_longer_than_the_whole() -> None:
    bench = demo_phases_module()
    for label, _, _ in bench.PHASES:  # four top-level phases of 0.3 s in a demo of 1 s
        bench.timings[label].append(0.3)
    bench.timings[bench.WHOLE].append(1.0)
    with pytest.raises(SystemExit, match=r"the phases add up to 1\.200 s, more than the whole"):
        bench.check(1)
    bench.timings[bench.WHOLE][0] = 1.3
    bench.check(1)  # within the whole: no complaint


def test_the_engine_benchmark_agrees_with_scipy_statsmodels_and_the_floor() -> None:
    out = smoke("engine_scale.py")
    (analysed,) = numbers(r"the run's ([\d,]+) analysed rows", out)
    assert "checked: the run's statistics and p-values equal the plain script's (scipy, " \
           "statsmodels) to 1e-09 relative" in out
    assert "and the floor finds H1's events and totals" in out
    assert numbers(r"rows read ([\d,]+), analysed ([\d,]+); engine duckdb", out) == \
        [20_000, analysed]
    assert 15_000 < analysed < 20_000  # ages 16-90 drawn, 18-85 analysed
    assert "(the goals are set at 20,000,000 rows)" in out
    assert "MET" not in out.replace("NOT MET", "")  # no verdict on a goal at smoke size


def test_the_formats_benchmark_reads_the_same_rows_from_xpt_and_csv() -> None:
    out = smoke("formats_scale.py")
    assert numbers(r"all four routes read ([\d,]+) rows", out) == [20_000]
    (analysed,) = numbers(r"analyse ([\d,]+) and find the events and totals per arm that "
                          r"pandas counts", out)
    assert 15_000 < analysed < 20_000  # ages 16-90 drawn, 18-85 analysed, a few missing
    for route in ("csv duckdb", "csv pandas", "xpt duckdb", "xpt pandas"):
        assert route in out
    assert "(the comparison is made at 2,000,000 rows)" in out


def test_the_families_benchmark_agrees_between_routes_scipy_and_the_run() -> None:
    out = smoke("families_run.py")
    assert out.startswith("100 terms, 30,000 rows")
    flagged, total = numbers(r"members flagged\s+(\d+) of (\d+)", out)
    assert total == 100 and 0 < flagged < 100  # every 7th term's rate tripled on the new gel
    assert "checked: the 100 members' p-values agree between the routes (1e-12 relative) " \
           "and with scipy.stats.fisher_exact (1e-9), their flags between the routes, and " \
           "the run's results.json holds the same p-values and flags" in out


def test_the_fisher_benchmark_agrees_with_scipy() -> None:
    out = smoke("fisher_many.py")
    found = re.findall(r"checked: all (\d+) p-values equal scipy's, largest relative "
                       r"difference (\S+)", out)
    assert [n for n, _ in found] == ["200", "200"], out  # the two sets of tables
    assert all(float(worst) <= 1e-12 for _, worst in found), found
    assert "checked: all 20 intervals equal scipy's" in out
    assert "30x goal" not in out  # no verdict on the goal at smoke size


def test_the_simulation_benchmark_decides_as_the_scipy_loop() -> None:
    out = smoke("simulate_speed.py")
    assert "trials: 2000 (three arms of 60" in out
    assert "identical decisions on the 200 common trials: True" in out
    assert "identical decisions on the 5 common trials: True" in out
    power = numbers(r"H\d (0\.\d+)", out)
    # rates 0.10, 0.06, 0.03: H1 (0.03 vs 0.10) is the widest gap, H3 (0.03 vs 0.06) the
    # narrowest
    assert len(power) == 3 and power[0] > power[1] > power[2] > 0, out


def test_the_tipping_point_benchmark_agrees_with_the_scalar_tests() -> None:
    out = smoke("tipping_point.py")
    assert out.startswith("grid 21 × 21 = 441 cells; complete cases 12/60 and 18/60; "
                          "loop timed on 441 cells")
    rows = re.findall(r"(?m)^(pearson-chi-square \(Yates\)|pearson-chi-square|fisher-exact|"
                      r"farrington-manning \(NI, RD −0\.1\))\s.*\s(\S+)$", out)
    assert [name for name, _ in rows] == ["pearson-chi-square", "pearson-chi-square (Yates)",
                                          "fisher-exact", "farrington-manning (NI, RD −0.1)"]
    assert all(float(worst) <= 1e-9 for _, worst in rows), rows


def test_the_verify_speed_benchmark_runs_at_its_smoke_size() -> None:
    """A log of 200 entries (199 report folders): verify passes with a locked verdict per run,
    and after the appends each log is intact and its record of the checked prefix names it
    all (asserted inside the script); here, that every line it promises is printed."""
    done = subprocess.run([sys.executable, str(BENCH / "verify_speed.py"), "--smoke"],
                          capture_output=True, text=True, timeout=300, check=False)
    assert done.returncode == 0, done.stdout + done.stderr
    lines = done.stdout.splitlines()
    assert lines[0].startswith("built a log of 200 entries and 199 report folders in ")
    assert re.fullmatch(r"prespec verify \(everything\) +\d+\.\d+ s  \(\d+\.\dx the chain "
                        r"check; goal <= 3x\)", lines[2]), lines[2]
    assert lines[3].startswith("  the same again, in CPU time")
    assert lines[4].startswith("append at 10 entries (median of 5)")
    assert re.fullmatch(r"append at 200 entries \(median of 5\) +\d\.\d+ s  \(\d+\.\d\dx the "
                        r"append at 10; goal <= 2x\)", lines[5]), lines[5]
    assert lines[-1] == ("checks: verify passed (199 reports, 199 locked runs); both logs "
                         "intact after the appends, each record naming its whole log")


def test_the_adjusted_coverage_benchmark_checks_what_it_compares() -> None:
    out = smoke("adjusted_coverage.py")
    assert out.startswith("g-computation under a misspecified working model: 40 trials a "
                          "scenario, 400 units a trial, seed 2023")
    assert "checked: the true risk difference by quadrature equals a Monte Carlo average of " \
           "100,000 draws within 4 standard errors; the null truth is 0" in out
    value, se = numbers(r"unadjusted difference \(max \|diff\| (\S+)\) and its ye and ge "
                        r"standard errors the Wald one \(max relative diff (\S+)\)", out)
    assert value <= 1e-12 and se <= 1e-9, out
    (worst,) = numbers(r"balance every stratum to within (\d+) unit", out)
    assert worst <= 2
    scenarios = re.findall(r"(?m)^(simple|stratified), (null|effect) \(true risk difference "
                           r"([-+]\d\.\d{4})\)$", out)
    assert [(a, b) for a, b, _ in scenarios] == [
        ("simple", "null"), ("simple", "effect"), ("stratified", "null"),
        ("stratified", "effect")]
    truths = [float(t) for _, _, t in scenarios]
    assert truths[0] == truths[2] == 0.0 and truths[1] == truths[3] < 0
    rows = re.findall(r"(?m)^  ((?:unadjusted|g-computation)\D*?)\s+[01]\.\d{4} \(", out)
    simple = ["unadjusted: pooled z / Wald", "unadjusted: Newcombe", "g-computation, ye",
              "g-computation, ge"]
    stratified = simple[:3] + ["g-computation, ye stratified", "g-computation, ge"]
    assert rows == simple * 2 + stratified * 2, rows
    assert len(re.findall(r"(?m)^  power gained by ", out)) == 2 + 3


def test_the_adjusted_coverage_benchmark_stops_on_a_wrong_truth(
        monkeypatch: pytest.MonkeyPatch) -> None:
    spec = importlib.util.spec_from_file_location("adjusted_coverage_bench",
                                                  BENCH / "adjusted_coverage.py")
    assert spec is not None and spec.loader is not None
    bench = importlib.util.module_from_spec(spec)
    monkeypatch.setitem(sys.modules, "adjusted_coverage_bench", bench)  # for its dataclasses
    spec.loader.exec_module(bench)
    rng = np.random.default_rng(1)
    right = bench.true_difference
    monkeypatch.setattr(bench, "true_difference", lambda effect: right(effect) + 0.01)
    with pytest.raises(SystemExit, match=r"^check failed: the null truth is 0\.01, not 0$"):
        bench.checks(rng, 400, 20_000)
    monkeypatch.setattr(bench, "true_difference", lambda effect: right(effect) + 0.01 * effect)
    with pytest.raises(SystemExit, match=r"^check failed: quadrature -0\.0\d+, Monte Carlo "):
        bench.checks(rng, 400, 20_000)


def test_the_bayes_benchmark_agrees_with_the_loop_of_scipy_calls() -> None:
    out = smoke("bayes_oc.py")
    assert out.startswith("exact operating characteristics: 13 × 13 outcomes, 8 rate points "
                          "on the null boundary p_a = p_b + 0; Beta(1, 1) priors")
    met, cells, worst = numbers(r"checked: identical rule regions \(([\d,]+) of ([\d,]+) "
                                r"outcomes meet the rule\) and curves within 1e-09 \(largest "
                                r"difference (\S+)\)", out)
    assert cells == 169 and 0 < met < cells and worst <= 1e-9, out
    assert re.search(r"(?m)^prespec operating_characteristics\s+\d+\.\d+ s\s+1×$", out), out
    assert re.search(r"(?m)^loop of scipy calls\s+\d+\.\d s\s+\d+×$", out), out
    (error,) = numbers(r"type I error, the largest on the boundary: (0\.\d+) at", out)
    assert 0 < error < 0.1
    assert "goal" not in out  # no verdict on the goal at smoke size
