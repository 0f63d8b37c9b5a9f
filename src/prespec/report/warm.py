"""What the report notebook's kernel imports as it starts, before its first cell.

:func:`warm` runs in the kernel (ipykernel's ``exec_lines``, see ``render.py``), leaving no
name in the notebook's namespace and no output. It imports the report's section modules, which
the first cells call, and starts a thread that imports the statistics room
(:data:`IN_BACKGROUND`: numpy and scipy.special, about a third of a second), which only the
recompute cells near the end call. Between cells the kernel mostly waits for the notebook
client, so the import goes on while the first cells run, and the kernel answers (and the cells
start) a third of a second sooner.

The thread imports nothing that the first cells import while it runs: those modules import
neither numpy nor the statistics room at import time, and they are imported before the thread
starts. A cell that needs a module the thread is still importing waits for it (Python's import
lock), and a module that failed in the thread fails again, with its message, in the cell that
imports it; the thread itself stays silent (a message of it would land in whatever cell is
running).
"""

from __future__ import annotations

import importlib
import threading

#: Imported as the kernel starts, before it answers: what the first cells call.
AT_START = ("IPython.display", "prespec.report.sections", "prespec.report.summary",
            "prespec.report.families")
#: Imported in a thread of the kernel while the first cells run.
IN_BACKGROUND = ("prespec.stats",)
THREAD = "prespec-warm"


def warm() -> threading.Thread:
    """Import :data:`AT_START`, then start (and return) the thread that imports
    :data:`IN_BACKGROUND`."""
    for name in AT_START:
        importlib.import_module(name)
    thread = threading.Thread(target=_import_quietly, args=(IN_BACKGROUND,), name=THREAD,
                              daemon=True)
    thread.start()
    return thread


def _import_quietly(names: tuple[str, ...]) -> None:
    for name in names:
        try:
            importlib.import_module(name)
        except BaseException:  # noqa: BLE001 (the cell that imports it raises it)
            return
