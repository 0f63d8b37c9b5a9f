"""Executing the report notebook on a report folder and exporting it to stand-alone HTML.

:func:`render_notebook` runs the template notebook shipped in the package with papermill, in
the report folder, passing it only the name and the SHA-256 of ``results.json``; the notebook
reads everything else from that file. The executed notebook becomes ``report.ipynb`` and its
HTML export, with the code hidden and the figures embedded, ``report.html``. Both are written
under temporary names and renamed into place only when both are complete.

The kernel costs most of a report's time whatever the data: it starts and imports what the
cells need (:mod:`prespec.report.warm`, run by the kernel as it starts). Given
``alongside`` (the figures), :func:`render_notebook` starts the kernel in a thread, calls
``alongside`` in the caller's thread meanwhile, and lets the notebook's first cell run only
once it has returned: the cells read the figures, and they see exactly the files, and give
exactly the bytes, that they would have seen had the figures been drawn first. A run starts
the kernel earlier still, before it reads the data (:class:`KernelAhead`); the notebook then
takes that kernel.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import logging
import os
import queue
import subprocess
import threading
from collections.abc import Callable
from pathlib import Path
from typing import Any

import nbformat
from nbformat import NotebookNode

from prespec.common.shown import visible
from prespec.errors import PrespecError
from prespec.report.template import filled

TEMPLATE = Path(__file__).with_name("template.ipynb")

RESULTS = "results.json"
NOTEBOOK = "report.ipynb"
HTML = "report.html"
KERNEL = "python3"
_PARTIAL_NOTEBOOK = ".report.partial.ipynb"
_PARTIAL_HTML = ".report.partial.html"

# The lab template of nbconvert, without the scripts it would fetch from the network
# (require.js, MathJax, Mermaid): the report needs none of them and must stand alone.
_HTML_TEMPLATE_NAME = "prespec_report.html.j2"
_HTML_TEMPLATE = """\
{%- extends 'index.html.j2' -%}
{%- block html_head_js -%}{%- endblock html_head_js -%}
{%- block html_head_js_mathjax -%}{%- endblock html_head_js_mathjax -%}
{%- block html_head_js_mermaidjs -%}{%- endblock html_head_js_mermaidjs -%}
{% block data_png scoped %}
<div class="jp-RenderedImage jp-OutputArea-output {{ extra_class }}">
<img src="data:image/png;base64,{{ output.data['image/png'] | escape_html }}" \
alt="{{ ((output | get_metadata('alt', 'image/png')) or 'figure') | escape_html }}">
</div>
{%- endblock data_png %}
{%- block html_head_css -%}
<style type="text/css">
body { max-width: 68rem; margin: 0 auto; padding: 1rem 1.5rem 3rem; }
/* nothing is wider than the page: long values (hashes, paths, labels) wrap, anywhere if need be */
.jp-Notebook, .jp-Cell, .jp-OutputArea, .jp-OutputArea-child, .jp-OutputArea-output {
  max-width: 100%; min-width: 0; overflow-x: visible;
}
.jp-OutputArea-output img { max-width: 100%; height: auto; }
.jp-RenderedHTMLCommon { overflow-wrap: break-word; }
.jp-RenderedHTMLCommon table.prespec { margin: 0.4em 0 1em; border-collapse: collapse;
  table-layout: auto; max-width: 100%; }
.jp-RenderedHTMLCommon table.prespec th, .jp-RenderedHTMLCommon table.prespec td {
  border: 1px solid #c8c8c8; padding: 0.25em 0.7em; text-align: left; vertical-align: top;
  overflow-wrap: break-word; max-width: none;
}
.jp-RenderedHTMLCommon table.prespec td.prespec-long { overflow-wrap: anywhere; }
.jp-RenderedHTMLCommon table.prespec td.num {
  text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap;
}
.jp-RenderedHTMLCommon table.prespec thead th { background: #ececec; }
/* a family's table has ten columns: tighter, so that it fits the page */
.jp-RenderedHTMLCommon table.prespec-family { font-size: 0.92em; }
.jp-RenderedHTMLCommon table.prespec-family th, .jp-RenderedHTMLCommon table.prespec-family td {
  padding: 0.2em 0.4em; }
.jp-RenderedHTMLCommon table.prespec tbody tr:nth-child(odd) { background: #fafafa; }
.jp-RenderedHTMLCommon table.prespec-fields th { background: #f3f3f3; font-weight: 600; }
.jp-RenderedHTMLCommon table.prespec-fields th { min-width: 8em; }
.jp-RenderedHTMLCommon table.prespec tr.prespec-hash td { overflow-wrap: anywhere;
  font-family: monospace; }
.prespec-nowrap { white-space: nowrap; }
.prespec-hyp { border-top: 1px solid #bdbdbd; margin-top: 1.6em; }
.prespec-exploratory { font-weight: normal; font-style: italic; color: #555555; }
/* the first screen */
.jp-RenderedHTMLCommon table.prespec-facts { width: 100%; }
.jp-RenderedHTMLCommon table.prespec-facts th { width: 13em; }
.jp-RenderedHTMLCommon table.prespec-summary-results { width: 100%; }
.jp-RenderedHTMLCommon table.prespec-summary-results td.prespec-estimate { white-space: normal;
  min-width: 13.5em; }
.jp-RenderedHTMLCommon table.prespec-summary-results th:nth-child(5) { white-space: nowrap; }
.prespec-measure { color: #555555; font-size: 0.85em; }
.jp-RenderedHTMLCommon tr.prespec-followup-row td:first-child { padding-left: 1.6em; }
.prespec-summary-note { color: #444444; font-size: 0.9em; }
.prespec-contents { border: 1px solid #c8c8c8; background: #fafafa; padding: 0.4em 1em;
  margin: 0.8em 0 1.2em; }
.prespec-contents ol { margin: 0.2em 0; columns: 2 18rem; }
.prespec-contents ol ol { columns: auto; font-size: 0.92em; }
.prespec-contents li { break-inside: avoid; }
.prespec-anchor { display: block; height: 0; }
/* a hypothesis: what it asks on the left, its result on the right, the rest across */
.prespec-hyp-body { display: grid; grid-template-columns: minmax(0, 1fr) minmax(0, 1fr);
  column-gap: 1.5rem; align-items: start; }
.prespec-hyp-body > div { min-width: 0; grid-column: 1 / -1; }
.prespec-hyp-body > .prespec-part-definition { grid-column: 1; grid-row: 1; }
.prespec-hyp-body > .prespec-part-estimand { grid-column: 1; grid-row: 2; }
.prespec-hyp-body > .prespec-part-result { grid-column: 2; grid-row: 1 / span 2; }
.prespec-hyp-body table.prespec-fields { width: 100%; }
.jp-RenderedHTMLCommon .prespec-part-result table.prespec-fields td { min-width: 10em; }
@media (max-width: 46rem) {
  .prespec-hyp-body { display: block; }
}
@media print {
  body { max-width: none; padding: 0; font-size: 10pt; }
  .prespec-hyp-body { display: block; }
  .prespec-contents ol { columns: auto; }
  tr, img, .prespec-hyp-body > div,
  .prespec-contents li { break-inside: avoid; }
  h1, h2, h3, h4 { break-after: avoid; }
  .jp-RenderedHTMLCommon table.prespec td.num { white-space: normal; }
}
</style>
{%- endblock html_head_css -%}
"""


def results_digest(path: Path) -> str:
    """``sha256:<hex>`` of a file's bytes."""
    return "sha256:" + hashlib.sha256(path.read_bytes()).hexdigest()


def render_notebook(folder: Path, *, kernel_name: str | None = None,
                    alongside: Callable[[], object] | None = None,
                    meanwhile: Callable[[], object] | None = None) -> None:
    """Execute the report notebook in ``folder`` and write ``report.ipynb`` and ``report.html``.

    ``folder`` must hold ``results.json`` and the figures that :func:`write_figures` wrote,
    or ``alongside`` must write them: it is called in this thread while the kernel starts, and
    no cell runs before it has returned (an exception from it stops the kernel before its
    first cell, and is raised as it is). ``meanwhile`` (only with ``alongside``) is called in
    this thread once ``alongside`` has returned, while the cells run: work the cells do not
    read (an exception from it stops the notebook at its next cell, and is raised as it is).
    The kernel is the current interpreter's ipykernel (``python3``) unless ``kernel_name`` says
    otherwise. Any failure raises :class:`prespec.errors.PrespecError` with a one-line message
    and leaves neither file behind.
    """
    folder = Path(os.path.abspath(folder))  # the notebook runs in a thread: no chdir
    results_path = folder / RESULTS
    if not results_path.is_file():
        raise PrespecError(f"{results_path}: no results file to report on")
    partial_nb = folder / _PARTIAL_NOTEBOOK
    partial_html = folder / _PARTIAL_HTML
    try:
        digest = results_digest(results_path)
        # the template, and a cell per hypothesis that recomputes it from tables/
        notebook = filled(json.loads(results_path.read_bytes()), folder)
        if alongside is None:
            executed = _execute(folder, partial_nb, digest, kernel_name or KERNEL, notebook)
        else:
            executed = _execute_alongside(folder, partial_nb, digest, kernel_name or KERNEL,
                                          notebook, alongside, meanwhile)
        _clean(executed, _title(results_path))
        page = _to_html(executed)
        nbformat.write(executed, partial_nb)
        partial_html.write_text(page, encoding="utf-8")
        os.replace(partial_nb, folder / NOTEBOOK)
        os.replace(partial_html, folder / HTML)
    except PrespecError:
        _discard(partial_nb, partial_html)
        raise
    except Exception as exc:  # any other failure of papermill, nbconvert or the disk
        _discard(partial_nb, partial_html)
        raise PrespecError(f"report for {folder}: {_one_line(exc)}") from exc


def _discard(*paths: Path) -> None:
    for path in paths:
        path.unlink(missing_ok=True)


def _one_line(exc: BaseException) -> str:
    words = " ".join(str(exc).split())
    return f"{type(exc).__name__}: {words}" if words else type(exc).__name__


KERNEL_STARTS = 3  # tries at starting the notebook's kernel
_KERNEL_START_FAILED = "Kernel died before replying to kernel_info"

#: What the kernel runs as it starts (ipykernel's ``exec_lines``): the imports of
#: :mod:`prespec.report.warm`, in no name of the notebook's namespace and in no cell's output,
#: so that they overlap the figures and the first cells.
_WARM_LINES = "__import__('prespec.report.warm', fromlist=['warm']).warm()"


class _Stopped(Exception):
    """The notebook stopped before a cell: the work beside it failed or was interrupted."""


def _execute_alongside(folder: Path, output: Path, digest: str, kernel_name: str,
                       notebook: NotebookNode, alongside: Callable[[], object],
                       meanwhile: Callable[[], object] | None = None) -> NotebookNode:
    """:func:`_execute` in a thread while ``alongside()`` runs in this one; the notebook's
    cells wait for it, then run while ``meanwhile()`` runs here. A failure of any is raised
    here once the thread has ended (the kernel shut down, no file of it left but the partial
    notebook, which the caller removes)."""
    ready = threading.Event()
    stop = threading.Event()
    outcome: dict[str, Any] = {}

    def gate(**_: Any) -> None:
        # before every cell: any cell may read a figure (the population section embeds the
        # flow figure when it finds it), so none runs before they are all drawn; an
        # interrupt or a failure beside the notebook stops it at the next cell
        ready.wait()
        if stop.is_set():
            raise _Stopped("stopped")

    def work(given: Any = None) -> None:
        try:
            outcome["node"] = _execute(folder, output, digest, kernel_name, notebook, gate,
                                       given)
        except BaseException as exc:  # noqa: BLE001 (raised in the caller's thread)
            outcome["error"] = exc

    ahead = _take_waiting() if kernel_name == KERNEL else None
    if ahead is not None:  # started while the data were read: it runs the notebook
        thread = ahead.run(folder, work)
    else:
        thread = threading.Thread(target=work, name="prespec-notebook", daemon=True)
        thread.start()
    try:
        try:
            alongside()
        except BaseException:
            stop.set()  # before the cells are let through: none runs
            raise
        finally:
            ready.set()
        if meanwhile is not None:
            meanwhile()
        if thread.is_alive():  # the kernel is still starting: the page's exporter meanwhile
            _warm_html()
        while thread.is_alive():
            thread.join(0.05)
    except BaseException:
        stop.set()
        ready.set()
        thread.join()
        raise
    if "error" in outcome:
        raise outcome["error"]
    node: NotebookNode = outcome["node"]
    return node


def _execute(folder: Path, output: Path, digest: str, kernel_name: str,
             notebook: NotebookNode | None = None,
             before_cell: Callable[..., None] | None = None,
             given: Any = None) -> NotebookNode:
    import papermill
    from papermill.exceptions import PapermillExecutionError

    # papermill logs each cell at INFO level; a report run prints nothing of that.
    logger = logging.getLogger("papermill")
    level = logger.level
    logger.setLevel(logging.WARNING)
    try:
        for attempt in range(1, KERNEL_STARTS + 1):
            options = _kernel_options(kernel_name, given)
            given = None  # a kernel given is used once; a second try starts its own
            try:
                node: NotebookNode = papermill.execute_notebook(
                    str(TEMPLATE) if notebook is None else notebook,
                    str(output),
                    parameters={"results_file": RESULTS, "results_sha256": digest},
                    kernel_name=kernel_name,
                    progress_bar=False,
                    log_output=False,
                    request_save_on_cell_execute=False,  # written once, at the end
                    shutdown_kernel="immediate",
                    # the kernel's working folder (papermill's cwd= would change this
                    # process's, which the thread beside the notebook shares)
                    resources={"metadata": {"path": str(folder)}},
                    **({"on_cell_execute": before_cell} if before_cell else {}),
                    **options,
                )
                break
            except RuntimeError as exc:
                # a kernel that dies while starting (seen with many runs starting at once,
                # when another process takes a port it chose) has run no cell: start anew
                if _KERNEL_START_FAILED not in str(exc) or attempt == KERNEL_STARTS:
                    raise
    except PapermillExecutionError as exc:
        message = " ".join(str(exc.evalue).split())
        raise PrespecError(
            f"report notebook failed in cell {exc.exec_count}: {exc.ename}: {message}"
        ) from exc
    finally:
        logger.setLevel(level)
    return node


def _kernel_options(kernel_name: str, given: Any = None) -> dict[str, Any]:
    """Options for the notebook client: this interpreter's kernel, with encrypted local sockets.

    ``python3`` always means the ipykernel of the running interpreter (``sys.executable``),
    even where a user-level kernelspec of that name points at another Python. The kernel's
    local sockets are encrypted where libzmq can (the kernel then also stays quiet).
    ``given``: a kernel manager whose kernel already runs (:class:`KernelAhead`); the
    notebook client takes it as its own (and shuts it down at the end) in place of a new one.
    """
    if given is not None:
        options = _kernel_options(kernel_name)
        options["kernel_manager_class"] = _handing_over(given)
        return options
    import zmq
    from jupyter_client.manager import AsyncKernelManager
    from traitlets.config import Config

    options: dict[str, Any] = {}
    if zmq.has("curve"):
        options["config"] = Config({"KernelManager": {"transport_encryption": "auto"}})
    quiet = _quiet_manager(AsyncKernelManager)
    options["kernel_manager_class"] = (_this_interpreter_manager(quiet) if kernel_name == KERNEL
                                       else quiet)
    if kernel_name == KERNEL:  # an ipykernel: it imports what the cells need as it starts
        options["extra_arguments"] = [f"--IPKernelApp.exec_lines={_WARM_LINES}"]
    return options


def _handing_over(given: Any) -> type[Any]:
    """A kernel manager class whose first instance is ``given`` (its kernel running): the
    notebook client then skips the start, takes the kernel and shuts it down when done."""
    base = type(given)
    waiting = [given]

    class HandOver(base):  # type: ignore[misc, valid-type]
        def __new__(cls, *args: Any, **kwargs: Any) -> Any:
            if waiting:
                return waiting.pop()  # not a HandOver: its __init__ is not run again
            return base(*args, **kwargs)

    return HandOver


# --- a kernel started while the data are read -----------------------------------------------

_WAITING: list[KernelAhead] = []
_WAITING_LOCK = threading.Lock()


class KernelAhead:
    """This interpreter's kernel, started (and importing what :mod:`prespec.report.warm`
    names) in a thread of its own before the report exists, for the next notebook that
    :func:`render_notebook` runs with ``alongside``: while a run reads and reduces its data,
    the kernel starts.

    The kernel is started in Jupyter's runtime folder and moved into the report folder
    (``os.chdir`` in a silent request: no name, no output, no history) before the notebook
    client takes it; the notebook then runs in this thread (the kernel's event loop lives
    here). Anything that fails before the hand-over leaves the notebook to start its own
    kernel, as without it. :meth:`close` shuts a kernel down that no notebook took."""

    def __init__(self) -> None:
        self._job: queue.SimpleQueue[tuple[Path, Callable[[Any], None]] | None] = (
            queue.SimpleQueue())
        self._abandoned = threading.Event()
        self._thread = threading.Thread(target=self._serve, name="prespec-notebook",
                                        daemon=True)
        self._thread.start()

    def run(self, folder: Path, work: Callable[[Any], None]) -> threading.Thread:
        """Run ``work(kernel manager or None)`` in this kernel's thread, the kernel moved to
        ``folder``; the thread, to join."""
        self._job.put((folder, work))
        return self._thread

    def close(self) -> None:
        """Shut the kernel down if no notebook took it (one still starting is stopped at
        once, not waited for); wait for its thread."""
        self._abandoned.set()
        self._job.put(None)
        self._thread.join()

    def _serve(self) -> None:
        from jupyter_core.utils import run_sync

        manager: Any = None
        client: Any = None
        try:
            try:
                options = _kernel_options(KERNEL)
                manager = options["kernel_manager_class"](kernel_name=KERNEL,
                                                          config=options.get("config"))
                # as the notebook client starts a kernel: its history in memory, not on disk
                arguments = [*options["extra_arguments"], "--HistoryManager.hist_file=:memory:"]
                client = run_sync(_start_ahead)(manager, _start_folder(), arguments,
                                                self._abandoned)
            except Exception:  # noqa: BLE001 (the notebook starts its own, which says why)
                client = None
            job = self._job.get()
            if job is None:
                return
            folder, work = job
            if client is not None:
                try:
                    run_sync(_move_kernel)(client, str(folder))
                except Exception:  # noqa: BLE001 (as above)
                    client = None
            work(manager if client is not None else None)
        finally:
            # a kernel no notebook took (or one left running by a failure before it did)
            with contextlib.suppress(Exception):
                if client is not None:
                    client.stop_channels()
                if manager is not None and manager.has_kernel:
                    run_sync(manager.shutdown_kernel)(now=True)


def _start_folder() -> str:
    """Where a kernel ahead starts (its ``sys.path[0]``) before it moves to the report folder:
    Jupyter's runtime folder, which holds the kernels' connection files and no Python module
    that could stand in for one the cells import, and exists whatever happens to the run
    (a temporary folder of its own would be left behind by a run killed meanwhile)."""
    from jupyter_core.paths import jupyter_runtime_dir

    folder = jupyter_runtime_dir()
    os.makedirs(folder, exist_ok=True)
    return folder


async def _start_ahead(manager: Any, cwd: str, arguments: list[str],
                       abandoned: threading.Event) -> Any:
    """Start the kernel and wait until it answers (or until ``abandoned``: then None)."""
    import asyncio

    await manager.start_kernel(cwd=cwd, extra_arguments=arguments)
    client = manager.client()
    client.start_channels()
    ready = asyncio.ensure_future(client.wait_for_ready(timeout=60))
    while not ready.done():
        await asyncio.wait({ready}, timeout=0.05)
        if abandoned.is_set() and not ready.done():
            ready.cancel()
            client.stop_channels()
            return None
    ready.result()
    return client


async def _move_kernel(client: Any, folder: str) -> None:
    """The kernel's working folder becomes ``folder`` (where papermill would have started it)."""
    msg_id = client.execute(f"__import__('os').chdir({folder!r})", silent=True,
                            store_history=False)
    while True:
        reply = await client.get_shell_msg(timeout=60)
        if reply["parent_header"].get("msg_id") == msg_id:
            break
    client.stop_channels()
    if reply["content"].get("status") != "ok":
        raise RuntimeError(f"the kernel did not move to {folder}")


def start_kernel_ahead() -> KernelAhead:
    """Start a kernel for the next report notebook of this process (see :class:`KernelAhead`);
    give the handle to :func:`close_kernel_ahead` when the report is done or abandoned."""
    ahead = KernelAhead()
    with _WAITING_LOCK:
        _WAITING.append(ahead)
    return ahead


def close_kernel_ahead(ahead: KernelAhead) -> None:
    """Shut down ``ahead``'s kernel if no notebook took it."""
    with _WAITING_LOCK:
        if ahead not in _WAITING:
            return  # a notebook took it (and shut it down)
        _WAITING.remove(ahead)
    ahead.close()


def _take_waiting() -> KernelAhead | None:
    with _WAITING_LOCK:
        return _WAITING.pop(0) if _WAITING else None


def _quiet_manager(base: type[Any]) -> type[Any]:
    """A kernel manager whose kernel writes nothing to prespec's terminal.

    The kernel process inherited prespec's stdout and stderr, and at the end of every notebook
    jupyter_client interrupts the kernel (SIGINT) before asking it to shut down; a kernel
    caught in a message handler or its event loop by that signal writes "KeyboardInterrupt
    caught in kernel" straight to the terminal, after the command's own output. Here the
    kernel's own stdout and stderr go to the null device (what a cell prints reaches the
    notebook through the kernel's messages, not through them), and a kernel that is shutting
    down (the notebook has finished; nothing runs) gets the shutdown request without the
    interrupt.
    """

    from traitlets import default

    class QuietKernel(base):  # type: ignore[misc, valid-type]
        @default("client_factory")
        def _prompt_client(self) -> type[Any]:
            return _prompt_client_class()

        async def _async_launch_kernel(self, kernel_cmd: list[str], **kw: Any) -> None:
            kw["stdout"] = subprocess.DEVNULL
            kw["stderr"] = subprocess.DEVNULL
            await super()._async_launch_kernel(kernel_cmd, **kw)

        async def _async_interrupt_kernel(self) -> None:
            if self.shutting_down:
                return
            await super()._async_interrupt_kernel()

        async def _async_wait(self, pollinterval: float = 0.1) -> None:
            # a killed kernel is gone within milliseconds; jupyter_client looks every 0.1 s
            await super()._async_wait(pollinterval=min(pollinterval, 0.005))

    return QuietKernel


def _prompt_client_class() -> type[Any]:
    """The asynchronous kernel client, with a :meth:`wait_for_ready` that ends as soon as the
    kernel has answered and its IOPub channel has carried the whole answer.

    jupyter_client's own ends only after 0.2 s in which IOPub carried nothing, a wait the
    report paid twice (once for a kernel started ahead, once more when the notebook client
    took it). Here, as there, the kernel is asked for its info until it replies with IOPub
    connected (a subscriber that joins late misses what was sent before it joined); then
    IOPub is read up to the kernel's "idle" status for the request answered, which the
    kernel sends after everything else that request caused, so nothing of it is left
    unread. A kernel that sends no such status (none known) is waited for as there: until
    0.2 s of silence."""
    from jupyter_client.asynchronous import AsyncKernelClient

    class PromptClient(AsyncKernelClient):  # type: ignore[misc]
        async def wait_for_ready(self, timeout: float | None = None) -> None:
            import time
            from queue import Empty

            deadline = time.time() + (float("inf") if timeout is None else timeout)
            while True:
                self.kernel_info()
                try:
                    reply = await self.shell_channel.get_msg(timeout=1)
                except Empty:
                    reply = None
                if reply is not None and reply["msg_type"] == "kernel_info_reply":
                    try:  # IOPub connected: something of the request arrives on it
                        first = await self.iopub_channel.get_msg(timeout=0.2)
                    except Empty:
                        pass
                    else:
                        self._handle_kernel_info_reply(reply)
                        break
                if not await self._async_is_alive():
                    raise RuntimeError("Kernel died before replying to kernel_info")
                if time.time() > deadline:
                    raise RuntimeError(f"Kernel didn't respond in {timeout:.0f} seconds")
            asked = reply["parent_header"].get("msg_id")
            message = first
            while not _idle_after(message, asked):
                try:
                    message = await self.iopub_channel.get_msg(timeout=0.2)
                except Empty:
                    break

    return PromptClient


def _idle_after(message: dict[str, Any], request: str | None) -> bool:
    """Whether ``message`` is the kernel's "idle" status at the end of ``request``."""
    return (message.get("msg_type") == "status"
            and message.get("content", {}).get("execution_state") == "idle"
            and message.get("parent_header", {}).get("msg_id") == request)


def _this_interpreter_manager(base: type[Any]) -> type[Any]:
    from ipykernel.kernelspec import RESOURCES, get_kernel_dict
    from jupyter_client.kernelspec import KernelSpec, KernelSpecManager
    from traitlets import default

    class ThisInterpreterSpecs(KernelSpecManager):  # type: ignore[misc]
        def get_kernel_spec(self, kernel_name: str) -> KernelSpec:
            if kernel_name == KERNEL:
                return KernelSpec(resource_dir=RESOURCES, **get_kernel_dict())
            return super().get_kernel_spec(kernel_name)

    class ThisInterpreterKernel(base):  # type: ignore[misc, valid-type]
        @default("kernel_spec_manager")
        def _specs(self) -> KernelSpecManager:
            return ThisInterpreterSpecs(data_dir=self.data_dir)

    return ThisInterpreterKernel


def _title(results_path: Path) -> str:
    """The plan's title for the page's <title> (the notebook itself shows the results)."""
    try:
        title = json.loads(results_path.read_bytes()).get("title")
    except (ValueError, AttributeError):
        return "prespec report"
    if not isinstance(title, str) or not title:
        return "prespec report"
    return f"{visible(title)} — prespec report"


def _clean(nb: NotebookNode, title: str) -> None:
    """Drop what makes the executed notebook differ from run to run: times and temp names;
    show hidden characters in the figures' alt texts."""
    meta: dict[str, Any] = nb.metadata.get("papermill", {})
    for key in ("start_time", "end_time", "duration"):
        meta.pop(key, None)
    meta["input_path"] = "template.ipynb"
    meta["output_path"] = NOTEBOOK
    for cell in nb.cells:
        cell.metadata.pop("execution", None)
        pm = cell.metadata.get("papermill")
        if isinstance(pm, dict):
            for key in ("start_time", "end_time", "duration"):
                pm.pop(key, None)
        if "injected-parameters" in cell.metadata.get("tags", []):
            cell.id = "injected-parameters"
        for output in cell.get("outputs", []):  # a figure's alt text names labels: visible
            image = output.get("metadata", {}).get("image/png")
            if isinstance(image, dict) and isinstance(image.get("alt"), str):
                image["alt"] = visible(image["alt"])
    nb.metadata["title"] = title


def _to_html(nb: NotebookNode) -> str:
    body, _resources = _html_exporter().from_notebook_node(
        nb, resources={"metadata": {"name": "report"}})
    return str(body)


_EXPORTERS = threading.local()


def _html_exporter() -> Any:
    """The page's exporter, made once per thread (its template compiled once; an exporter
    registers filters as it exports, so two threads never share one). The first thread to
    ask takes the one :func:`warm_ahead` made, once its thread has ended."""
    exporter = getattr(_EXPORTERS, "exporter", None)
    if exporter is None:
        exporter = _EXPORTERS.exporter = _take_warmed() or _new_html_exporter()
    return exporter


def _new_html_exporter() -> Any:
    import jinja2
    from nbconvert import HTMLExporter

    return HTMLExporter(
        template_name="lab",
        extra_loaders=[jinja2.DictLoader({_HTML_TEMPLATE_NAME: _HTML_TEMPLATE})],
        template_file=_HTML_TEMPLATE_NAME,
        exclude_input=True,
        exclude_input_prompt=True,
        exclude_output_prompt=True,
        exclude_anchor_links=True,
    )


def _warm_html() -> None:
    """Import nbconvert and export a notebook of one cell with the page's template, discarding
    the page: the first export in a process costs about a second (imports, the template,
    the filters' own imports), which is then paid while the kernel starts, not after the
    cells. A failure here is left to the report's own export, which says it."""
    with contextlib.suppress(Exception):  # the report's export raises it, in one line
        _exercise(_html_exporter())


def _exercise(exporter: Any) -> None:
    """Export a notebook of one cell with ``exporter``, discarding the page."""
    cell = nbformat.v4.new_code_cell(outputs=[nbformat.v4.new_output(
        "display_data", data={"text/html": "<p>warm</p>", "image/png": "iVBORw0KGgo="})])
    exporter.from_notebook_node(
        nbformat.v4.new_notebook(cells=[cell, nbformat.v4.new_markdown_cell("warm")]),
        resources={"metadata": {"name": "warm"}})


# --- the report's libraries, loaded while a run reads its data ---------------------------------

_WARMED: list[tuple[threading.Thread, dict[str, Any]]] = []
_WARMED_LOCK = threading.Lock()
#: What the figures and the notebook's client import: loaded by :func:`warm_ahead` (only
#: imported: matplotlib's settings are global, and the thread changes none of them while
#: figures may be drawn).
FIGURE_MODULES = ("matplotlib.figure", "matplotlib.backends.backend_agg", "matplotlib.style",
                  "matplotlib.ticker", "prespec.report.figures", "prespec.report.flow",
                  "prespec.report.bayes", "prespec.report.looks", "prespec.report.families",
                  "papermill")


def warm_ahead() -> threading.Thread | None:
    """Import what the figures need, and make and exercise the page's exporter, in a thread
    of their own, while a run reads and reduces its data (an engine that counts outside
    Python's lock, as duckdb and the servers do, leaves the thread free to run): about 1.3 s
    that a run would otherwise pay after its data, once per process. The exporter goes to
    the first :func:`_html_exporter` call, which waits for the thread. Nothing is started
    when this thread already holds an exporter and matplotlib is loaded (a second run of the
    same process); the thread (to join), or None. A failure in it is left to the report,
    which meets it again and says it."""
    import sys

    need_exporter = getattr(_EXPORTERS, "exporter", None) is None
    if not need_exporter and all(name in sys.modules for name in FIGURE_MODULES):
        return None
    made: dict[str, Any] = {}

    def work() -> None:
        import importlib

        with contextlib.suppress(Exception):
            for name in FIGURE_MODULES:
                importlib.import_module(name)
        if need_exporter:
            with contextlib.suppress(Exception):
                exporter = _new_html_exporter()
                _exercise(exporter)
                made["exporter"] = exporter

    thread = threading.Thread(target=work, name="prespec-warm", daemon=True)
    with _WARMED_LOCK:
        _WARMED.append((thread, made))
    thread.start()
    return thread


def _take_warmed() -> Any:
    """The exporter a :func:`warm_ahead` thread made (waiting for the thread), or None."""
    with _WARMED_LOCK:
        waiting = list(_WARMED)
        _WARMED.clear()
    exporter = None
    for thread, made in waiting:
        thread.join()
        exporter = exporter or made.get("exporter")
    return exporter
