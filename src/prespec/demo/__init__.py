"""The invented demonstration studies: ``wound`` (``prespec demo``), ``safety``
(``python -m prespec.demo.safety``) and ``adjusted`` (``python -m prespec.demo.adjusted``).
Their data are made up and describe nothing real."""

from __future__ import annotations

from collections.abc import Callable
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


def write_demo_main(argv: list[str] | None, *, module: str, what: str, description: str,
                    default_folder: str, plan_name: str, data_name: str, plan_text: str,
                    write: Callable[[Path], tuple[Path, Path]]) -> int:
    """``python -m prespec.demo.<module> [FOLDER]``: write a demo's plan and data into FOLDER,
    print their paths and the commands that lock and run them; a folder holding other files
    is refused (exit 2), so nothing is overwritten."""
    import argparse
    import sys

    from prespec.errors import BadInput

    parser = argparse.ArgumentParser(prog=f"python -m prespec.demo.{module}",
                                     description=description)
    parser.add_argument("folder", nargs="?", default=default_folder,
                        help=f"the folder to write into (default: {default_folder})")
    args = parser.parse_args(argv)
    folder = Path(args.folder)
    try:
        refuse_other_files(folder, plan_name, data_name, plan_text)
        plan, data = write(folder)
    except (BadInput, OSError) as exc:
        print(f"prespec: {exc}", file=sys.stderr)
        return 2
    print(f"Wrote the invented {what} (demonstration data, nothing real):")
    print(f"  plan: {plan}")
    print(f"  data: {data}")
    print(f"Lock and run it: prespec lock {plan} && prespec run {plan} {data}")
    return 0
