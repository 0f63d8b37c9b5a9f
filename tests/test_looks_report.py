"""The report's section on interim looks: the HTML shows the numbers results.json holds, the
boundary figure is drawn from them, and the terminal line says the decision."""

from __future__ import annotations

from pathlib import Path

from prespec.report import write_figures
from prespec.report.looks import decision_words, look_line, looks_block, looks_jobs, looks_name
from prespec.report.sections import hypothesis_blocks

LOOKS = {
    "look": 2, "of": 3, "efficacy": "hwang-shih-decani", "gamma": -4.0,
    "futility": {"spending": "lan-demets-pocock", "gamma": None, "binding": False},
    "sides": 1, "direction": 1, "planned_fractions": [0.25, 0.5, 1.0], "planned_total": 400,
    "analysed": 210, "observed_fraction": 0.525, "z": 2.9876, "information": 800.0,
    "estimate": 0.1056, "boundary": 2.6012, "futility_boundary": 0.1234, "crossed": True,
    "decision": "stop-for-efficacy",
    "boundaries": [
        {"look": 1, "fraction": 0.24, "observed_fraction": 0.24, "z": 3.1111,
         "nominal_p": 0.00093, "alpha_spent": 0.00093, "futility_z": -0.5, "beta_spent": 0.01},
        {"look": 2, "fraction": 0.525, "observed_fraction": 0.525, "z": 2.6012,
         "nominal_p": 0.00465, "alpha_spent": 0.00512, "futility_z": 0.1234,
         "beta_spent": 0.04},
    ],
    "planned_boundaries": [],
    "history": [{"look": 1, "analysed": 96, "fraction": 0.24, "z": 1.2345, "information": 380.0,
                 "estimate": 0.0633, "crossed": False}],
    "adjusted": {"measure": "risk-difference", "ordering": "stage-wise", "p_value": 0.00321,
                 "estimate": 0.0987, "ci": [0.0312, 0.1701], "level": 0.9, "look": 2},
    "repeated_ci": [{"look": 1, "estimate": 0.0633, "ci": [-0.0963, 0.2229], "level": 0.9},
                    {"look": 2, "estimate": 0.1056, "ci": [0.0136, 0.1976], "level": 0.9}],
    "scale": "risk difference",
}


def hyp() -> dict:
    return {"id": "H1", "title": "A vs B", "role": "primary", "kind": "pair",
            "outcome": "infection", "compare": ["a", "b"], "alternative": "greater",
            "comparison": "superiority", "test": "two-proportion-z", "planned_test":
            "two-proportion-z", "statistic": 2.9876, "p_value": 0.0014, "p_adjusted": 0.00321,
            "reject": True, "estimate": None, "table": {"groups": ["a", "b"], "events": [40, 20],
                                                       "totals": [105, 105]},
            "looks": LOOKS}


def test_the_section_shows_the_numbers_of_results_json() -> None:
    html, figures = looks_block(hyp(), "hypotheses.H1")
    assert figures == [(looks_name("H1"), ("Efficacy and futility boundaries of H1 against the "
                        "information fraction, with the observed z statistics"))]
    for shown in ("2 of 3", "hwang-shih-decani (gamma -4)", ("non-binding futility by "
                  "lan-demets-pocock"), "0.5250 (210 of 400 planned)", "2.988", "2.601", "0.123",
                  "stop for efficacy", "0.003210", "0.0987", "(0.0312, 0.1701)", "90%",
                  "(-0.0963, 0.2229)", "(0.0136, 0.1976)", "1.234", "0.00512"):
        assert shown in html, shown
    assert "±" not in html  # one-sided: upper boundary only


def test_no_section_without_looks() -> None:
    plain = hyp()
    del plain["looks"]
    assert looks_block(plain, "hypotheses.H1") == ("", [])
    assert looks_jobs({"kind": "run", "hypotheses": [plain]}) == []
    assert looks_jobs({"kind": "rehearsal", "hypotheses": [hyp()]}) == []


def test_the_figure_is_drawn_from_the_observed_and_boundary_values(tmp_path: Path) -> None:
    ((name, job),) = looks_jobs({"kind": "run", "hypotheses": [hyp()]})
    assert name == "figures/looks-H1.png"
    assert list(job.fractions) == [0.24, 0.525]
    assert list(job.upper) == [3.1111, 2.6012]
    assert list(job.observed) == [(0.24, 1.2345), (0.525, 2.9876)]
    fig = job.draw()
    lines = fig.axes[0].get_lines()
    assert list(lines[0].get_ydata()) == [3.1111, 2.6012]  # efficacy, one-sided upward
    assert list(lines[1].get_ydata()) == [-0.5, 0.1234]  # futility
    assert list(lines[2].get_ydata()) == [1.2345, 2.9876]  # observed z
    results = {"kind": "run", "groups": {}, "hypotheses": [hyp()], "multiplicity": "none"}
    written = write_figures(results, tmp_path)
    assert tmp_path / "figures" / "looks-H1.png" in written


def test_the_hypothesis_block_carries_the_section() -> None:
    results = {"kind": "run", "hypotheses": [hyp()], "multiplicity": "none", "overrides": []}
    ((html, figures),) = hypothesis_blocks(results)
    assert "Interim looks of H1" in html
    assert figures[0][0] == "figures/looks-H1.png"


def test_terminal_line() -> None:
    assert look_line(hyp()) == (
        "look 2 of 3 (information fraction 0.525): z = 2.988, efficacy boundary 2.601: "
        "stop for efficacy: the efficacy boundary is crossed (H0 rejected); adjusted p = "
        "0.003210, estimate 0.0987 (0.0312, 0.1701)")
    assert decision_words("futility-may-be-considered").startswith("futility may be considered")
