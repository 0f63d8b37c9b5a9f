"""The report's figures drawn while the notebook's kernel starts (``publish.FIGURES_WITH_KERNEL``,
``render_notebook(alongside=...)``) give the same bytes as the figures drawn first, and a
failure on either side stops both, leaves nothing and says the same one line."""

from __future__ import annotations

import base64
import os
import threading
import time
from pathlib import Path
from typing import Any

import pytest

import prespec.report
from prespec import api
from prespec.errors import PrespecError
from prespec.report import render
from prespec.workflow import publish


@pytest.fixture(scope="module")
def demo_results(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    """The results the demo publishes (its report drawn by stand-ins: only the results)."""
    captured: list[dict[str, Any]] = []
    original = publish.build_report
    mp = pytest.MonkeyPatch()

    def capture(folder: Path, results: dict[str, Any], **kwargs: Any) -> tuple[Path, str]:
        captured.append(results)
        return original(folder, results, **kwargs)

    mp.setattr(publish, "build_report", capture)
    mp.setattr(prespec.report, "render_notebook", lambda folder: None)
    mp.setattr(prespec.report, "write_figures", lambda results, folder, **_: [])
    try:
        api.demo(tmp_path_factory.mktemp("demo") / "demo")
    finally:
        mp.undo()
    assert len(captured) == 1
    return captured[0]


def _files(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _build(place: Path, results: dict[str, Any], at_once: bool,
           monkeypatch: pytest.MonkeyPatch) -> tuple[dict[str, bytes], str]:
    monkeypatch.setattr(publish, "FIGURES_WITH_KERNEL", at_once)
    place.mkdir()
    tmp, manifest = publish.build_report(place / "report", results)
    return _files(tmp), manifest


def _no_notebook_thread() -> bool:
    return not any(t.name == "prespec-notebook" and t.is_alive() for t in threading.enumerate())


def test_figures_beside_the_kernel_give_the_same_bytes_as_figures_first(
        demo_results: dict[str, Any], tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    first, first_manifest = _build(tmp_path / "first", demo_results, False, monkeypatch)
    draw = prespec.report.write_figures

    def late(results: dict[str, Any], folder: Path, **kwargs: Any) -> list[Path]:
        time.sleep(3)  # the kernel ready long before: no cell may run (or look for a figure)
        return draw(results, folder, **kwargs)  # the SVGs written while the cells run

    monkeypatch.setattr(prespec.report, "write_figures", late)
    beside, beside_manifest = _build(tmp_path / "beside", demo_results, True, monkeypatch)
    assert beside_manifest == first_manifest
    assert sorted(beside) == sorted(first)
    different = [name for name in first if first[name] != beside[name]]
    assert different == []
    # every file a report has: PNG and SVG per figure, the notebook, the page, the manifest
    names = set(first)
    assert {"results.json", "report.ipynb", "report.html", "manifest.json",
            "figures/differences.png", "figures/differences.svg", "figures/flow.png",
            "figures/flow.svg"} <= names
    # the page shows every figure the notebook read (all drawn before their cells ran)
    pngs = [n for n in names if n.endswith(".png")]
    assert len(pngs) == 3  # the outcome, the estimates, the participant flow
    for name in pngs:  # each as drawn, complete, in the page
        assert base64.b64encode(first[name]) in first["report.html"], name
    assert _no_notebook_thread()


def test_a_failure_of_the_figures_stops_the_kernel_and_leaves_nothing(
        demo_results: dict[str, Any], tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    messages = []
    for at_once in (False, True):
        place = tmp_path / f"at-once-{at_once}"
        place.mkdir()

        def broken(results: dict[str, Any], folder: Path, **_: Any) -> list[Path]:
            (folder / "figures").mkdir()
            raise PrespecError("results.json: groups: not a mapping")

        monkeypatch.setattr(prespec.report, "write_figures", broken)
        monkeypatch.setattr(publish, "FIGURES_WITH_KERNEL", at_once)
        with pytest.raises(PrespecError) as err:
            publish.build_report(place / "report", demo_results)
        messages.append(str(err.value))
        assert list(place.iterdir()) == []  # the temporary folder removed, nothing half-written
        assert _no_notebook_thread()
    assert messages == ["results.json: groups: not a mapping"] * 2


def test_a_failure_of_the_svgs_written_while_the_cells_run_leaves_nothing(
        demo_results: dict[str, Any], tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    draw = prespec.report.write_figures
    svgs_given: list[list[Any]] = []

    def failing_svgs(results: dict[str, Any], folder: Path, **kwargs: Any) -> list[Path]:
        written = draw(results, folder, **kwargs)
        svgs_given.append(kwargs["svgs_later"])
        kwargs["svgs_later"].append(lambda: (_ for _ in ()).throw(OSError("disk full")))
        return written

    monkeypatch.setattr(prespec.report, "write_figures", failing_svgs)
    monkeypatch.setattr(publish, "FIGURES_WITH_KERNEL", True)
    with pytest.raises(PrespecError, match="disk full"):
        publish.build_report(tmp_path / "report", demo_results)
    assert len(svgs_given[0]) == 4  # the demo's three figures, then the failing one
    assert list(tmp_path.iterdir()) == []
    assert _no_notebook_thread()


def test_an_interrupt_while_the_figures_are_drawn_stops_the_kernel(
        demo_results: dict[str, Any], tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    cells: list[int] = []
    original = render._execute

    def counting(*args: Any, **kwargs: Any) -> Any:
        gate = args[5] if len(args) > 5 else kwargs.get("before_cell")

        def counted(cell: Any, cell_index: int, **kw: Any) -> None:
            gate(cell=cell, cell_index=cell_index, **kw)
            cells.append(cell_index)  # reached only by a cell let through

        return original(*args[:5], counted)

    def interrupted(results: dict[str, Any], folder: Path, **_: Any) -> list[Path]:
        raise KeyboardInterrupt

    monkeypatch.setattr(render, "_execute", counting)
    monkeypatch.setattr(prespec.report, "write_figures", interrupted)
    monkeypatch.setattr(publish, "FIGURES_WITH_KERNEL", True)
    with pytest.raises(KeyboardInterrupt):
        publish.build_report(tmp_path / "report", demo_results)
    assert list(tmp_path.iterdir()) == []
    assert _no_notebook_thread()
    assert cells == []  # no cell ran: each waits for the figures


def test_a_kernel_that_cannot_start_is_the_same_one_line_error(
        demo_results: dict[str, Any], tmp_path: Path) -> None:
    folder = tmp_path / "report"
    folder.mkdir()
    (folder / "results.json").write_bytes(publish.results_bytes(demo_results))
    drawn: list[Path] = []
    messages = []
    for alongside in (None, lambda: drawn.append(folder)):
        with pytest.raises(PrespecError) as err:
            render.render_notebook(folder, kernel_name="no-such-kernel-here",
                                   alongside=alongside)
        messages.append(str(err.value))
        assert sorted(p.name for p in folder.iterdir()) == ["results.json"]
    assert drawn == [folder]  # the work beside the kernel was done before the error was raised
    assert messages[0] == messages[1]
    assert "\n" not in messages[0] and "no-such-kernel-here" in messages[0]
    assert _no_notebook_thread()


def _kernels() -> list[int]:
    """The ipykernel processes this process started and that still run (Linux /proc)."""
    found = []
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
            cmdline = (stat.parent / "cmdline").read_bytes()
        except OSError:
            continue
        if int(fields[1]) == os.getpid() and b"ipykernel" in cmdline and fields[0] != "Z":
            found.append(int(stat.parent.name))
    return found


def test_a_kernel_started_ahead_runs_the_notebook_with_the_same_bytes(
        demo_results: dict[str, Any], tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    first, first_manifest = _build(tmp_path / "first", demo_results, False, monkeypatch)
    monkeypatch.setattr(publish, "FIGURES_WITH_KERNEL", True)
    taken: list[Any] = []
    original = render._execute

    def spy(*args: Any, **kwargs: Any) -> Any:
        taken.append(args[6] if len(args) > 6 else None)  # the kernel handed over, if any
        return original(*args, **kwargs)

    monkeypatch.setattr(render, "_execute", spy)
    with publish.kernel_ahead():
        assert len(render._WAITING) == 1
        (tmp_path / "ahead").mkdir()
        tmp, manifest = publish.build_report(tmp_path / "ahead" / "report", demo_results)
        assert render._WAITING == []  # the notebook took it
    assert len(taken) == 1 and taken[0] is not None
    assert manifest == first_manifest
    assert _files(tmp) == first
    assert _kernels() == []  # the notebook shut it down
    assert _no_notebook_thread()


def test_the_page_exporter_made_while_the_data_are_read_gives_the_same_bytes(
        demo_results: dict[str, Any], tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    first, first_manifest = _build(tmp_path / "first", demo_results, False, monkeypatch)
    monkeypatch.setattr(publish, "FIGURES_WITH_KERNEL", True)
    taken: list[Any] = []
    original = render._take_warmed

    def spy() -> Any:
        taken.append(original())
        return taken[-1]

    monkeypatch.setattr(render, "_take_warmed", spy)
    out: dict[str, Any] = {}

    def a_run() -> None:  # a thread of its own: no exporter made in it yet, as in a new process
        try:
            with publish.kernel_ahead():
                (tmp_path / "warm").mkdir()
                out["built"] = publish.build_report(tmp_path / "warm" / "report", demo_results)
        except BaseException as exc:  # noqa: BLE001 (raised below)
            out["error"] = exc

    thread = threading.Thread(target=a_run)
    thread.start()
    thread.join()
    assert "error" not in out, out.get("error")
    tmp, manifest = out["built"]
    assert len(taken) == 1 and taken[0] is not None  # the exporter made ahead, not a new one
    assert manifest == first_manifest
    assert _files(tmp) == first
    assert render._WARMED == []
    assert not any(t.name == "prespec-warm" and t.is_alive() for t in threading.enumerate())
    # this thread made an exporter in its first build, and everything is loaded: no thread
    assert render.warm_ahead() is None


def test_a_kernel_started_ahead_and_not_used_is_shut_down(tmp_path: Path) -> None:
    for wait in (0.0, 3.0):  # abandoned while starting, and once it has started
        ahead = render.start_kernel_ahead()
        time.sleep(wait)
        render.close_kernel_ahead(ahead)
        assert render._WAITING == []
        assert _kernels() == []
        assert _no_notebook_thread()


def test_a_failed_run_shuts_the_kernel_ahead_down(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(publish, "FIGURES_WITH_KERNEL", True)
    with pytest.raises(PrespecError, match="bad data"), publish.kernel_ahead():
        raise PrespecError("bad data")
    assert render._WAITING == [] and _kernels() == [] and _no_notebook_thread()


def test_no_kernel_ahead_for_a_stand_in_renderer(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)
    with publish.kernel_ahead():
        assert render._WAITING == []


def test_a_failing_cell_is_the_same_one_line_error_with_figures_beside(
        demo_results: dict[str, Any], tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from prespec.report.figures import write_figures

    messages, left = [], []
    monkeypatch.setattr(render, "results_digest", lambda path: "sha256:" + "0" * 64)
    for at_once in (False, True):
        folder = tmp_path / f"at-once-{at_once}"
        folder.mkdir()
        (folder / "results.json").write_bytes(publish.results_bytes(demo_results))
        if not at_once:
            write_figures(demo_results, folder)
        with pytest.raises(PrespecError) as err:
            render.render_notebook(folder, alongside=(
                (lambda folder=folder: write_figures(demo_results, folder)) if at_once
                else None))
        messages.append(str(err.value))
        left.append(sorted(p.relative_to(folder).as_posix() for p in folder.rglob("*")))
    assert messages[0] == messages[1]
    assert "\n" not in messages[0] and "report notebook failed in cell" in messages[0]
    assert left[0] == left[1] and "report.ipynb" not in left[0] and "figures" in left[0]
    assert _no_notebook_thread() and _kernels() == []
