"""The versions that can change a result: recorded at lock time, compared at run time."""

from __future__ import annotations

import platform
from importlib import metadata

PACKAGES = ("numpy", "scipy", "statsmodels", "pandas", "prespec")


def environment() -> dict[str, str]:
    env = {"python": platform.python_version()}
    for name in PACKAGES:
        try:
            env[name] = metadata.version(name)
        except metadata.PackageNotFoundError:  # pragma: no cover - prespec always installed
            env[name] = "not installed"
    return env


def differences(locked: dict[str, str], now: dict[str, str]) -> list[tuple[str, str, str]]:
    """(name, locked version, current version) for every version that differs."""
    names = ["python", *PACKAGES]
    return [
        (n, locked.get(n, "absent"), now.get(n, "absent"))
        for n in names
        if locked.get(n) != now.get(n)
    ]
