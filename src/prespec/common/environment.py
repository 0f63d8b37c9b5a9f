"""The versions that can change a result: recorded at lock time, compared at run time.

A lock (and every run) records the Python version, the packages that compute
(``PACKAGES``), the libraries an engine counts with (``ENGINE_LIBRARIES``, ``not installed``
where absent) and the operating system (``os``). Locks written before the engine libraries
and the operating system were recorded hold only ``python`` and ``PACKAGES``; the report then
says "not recorded at lock" beside those, and nothing fails.

Only ``python`` and ``PACKAGES`` make the departure ``environment-differs-from-lock``
(:func:`differences`): an engine counts, and every engine gives the same counts; the report
shows the other differences highlighted.
"""

from __future__ import annotations

import platform

PACKAGES = ("numpy", "scipy", "statsmodels", "pandas", "prespec")
#: The distributions the engines count with (``data/engines/choose.py`` names each engine's).
ENGINE_LIBRARIES = ("duckdb", "SQLAlchemy", "psycopg", "pyspark")
#: Every key :func:`environment` writes, in the order the report shows them.
KEYS = ("python", "os", *PACKAGES, *ENGINE_LIBRARIES)
NOT_INSTALLED = "not installed"


def operating_system() -> str:
    """``Linux 6.8.0-45-generic (x86_64)``: the system, its release and the machine."""
    return f"{platform.system()} {platform.release()} ({platform.machine()})".strip()


def _version(name: str) -> str:
    from importlib import metadata  # here: the report's kernel imports this module for KEYS

    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:  # prespec is always installed; engines may not be
        return NOT_INSTALLED


def environment() -> dict[str, str]:
    """The versions recorded at lock time and in every results.json, keys in ``KEYS`` order."""
    env = {"python": platform.python_version(), "os": operating_system()}
    for name in (*PACKAGES, *ENGINE_LIBRARIES):
        env[name] = _version(name)
    return env


def differences(locked: dict[str, str], now: dict[str, str]) -> list[tuple[str, str, str]]:
    """(name, locked version, current version) for every version that differs."""
    names = ["python", *PACKAGES]
    return [
        (n, locked.get(n, "absent"), now.get(n, "absent"))
        for n in names
        if locked.get(n) != now.get(n)
    ]
