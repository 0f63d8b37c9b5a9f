"""The invented demonstration studies: ``wound`` (``prespec demo``), ``safety``
(``python -m prespec.demo.safety``) and ``adjusted`` (``python -m prespec.demo.adjusted``).
Their data are made up and describe nothing real."""

from __future__ import annotations

from pathlib import Path


def refuse_other_files(folder: Path, plan_name: str, data_name: str, plan_text: str) -> None:
    """Refuse (``BadInput``) a folder that is not one, or that holds anything but this demo's
    own plan (unchanged) and data: nothing of the user's is ever overwritten."""
    from prespec.errors import BadInput

    if not folder.exists():
        return
    if not folder.is_dir():
        raise BadInput(f"{folder}: exists and is not a folder")
    plan = folder / plan_name
    earlier = plan.is_file() and plan.read_text("utf-8") == plan_text
    others = [p for p in folder.iterdir() if p.name not in (plan_name, data_name)]
    if others or (plan.exists() and not earlier):
        raise BadInput(f"{folder}: exists and holds other files; choose an empty folder")
