"""The canonical form of a plan, what its fingerprint is taken over.

Golden fingerprints: the example plans in ``plans/`` and the test plans frozen in
``tests/fixtures/plans/`` (copied from the plans the other test modules build: sparse switches,
gates, every compare kind, graphical multiplicity, families, looks, sensitivity, estimands,
population filters, the design section, Monte Carlo, data sources). Each value was computed by
prespec at commit c74a456, before the canonical form was declared, so these tests prove that
declaring it moved no fingerprint. Never regenerate them: a plan must keep its fingerprint under
every later version. The lock files of earlier versions (``tests/fixtures/studies/``) must
rebuild to exactly the resolved plan they store.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from prespec.plan import fingerprint, load_plan, plan_from_resolved, resolve

ROOT = Path(__file__).parent.parent
FROZEN = Path(__file__).parent / "fixtures" / "plans"
STUDIES = Path(__file__).parent / "fixtures" / "studies"

# sha256 of the RFC 8785 JSON of the resolved plan, by prespec c74a456  # computed, then frozen
GOLDEN = {
    "plans/methods-tour.yaml":
        "sha256:2c6b68cc3c720ef6b89c2435dedbe18764406850ef132c2149bcb7ab30ed389d",
    "plans/safety-review.yaml":
        "sha256:a9ad4a412b45f68eb171f68e72fa1e66e9a1fa8b2b363b0a2875c3a7bec5a22d",
    "plans/wound-dressing.yaml":
        "sha256:7f1707a66696d7cb2301f395720e7f624fce4f13b8bd0d9a6c13f8c8f4a615ac",
    "all-kinds.yaml":
        "sha256:c8b6bf68ccea17596eb218144ee1791ffbaf96fdb0606246bcb7904bd0952c7f",
    "analysis-switches.yaml":
        "sha256:4b08b6b7b36617cb39576bdc50b9dbf76f6def16147e36aa51af99a31648edac",
    "design-kinds.yaml":
        "sha256:20dd4180d1a6d66fc5c77965fc4637ffe1419eb06fcf0bf4e25d67400d44471e",
    "design-scenarios.yaml":
        "sha256:df3f89b1338d923e3d4b1025764a503c85655b2c0bfba0004f4cc52d78e20ac9",
    "estimands-follow-ups.yaml":
        "sha256:42f2c0a944db77841741c43a725abb36a25e61b1012a875e5243c6e39bd50d39",
    "estimands.yaml":
        "sha256:2665b5e28dc9ad2ca40a3739df498b71bccf190c7374dddde8b8b69ae5704316",
    "family-beside-ordinary.yaml":
        "sha256:48b4fb8f19c6e8ecee248a692976871ebaa9ca8b36329d618dedea35b336f09d",
    "family-declared-list.yaml":
        "sha256:1c93c97002d81d4b1c2fb71cabb6379eda383207426124c503f4f07b9c6f85ff",
    "family-double-fdr.yaml":
        "sha256:742a575bcd4e9f41defc2a67c797762dff1b8df9ea10d69326fdca57e2b891ce",
    "filters.yaml":
        "sha256:f1402b564cae3a99e9b3e07c80c8703b618f66a50e68f14a5483d17002d1455a",
    "gated-follow-ups.yaml":
        "sha256:ca502740bfd09da51de63342e7c0be1cdf0f9ce7039afe606e8cd2d90cbb76b6",
    "graphical.yaml":
        "sha256:9ac7f9b2bee478e6209132357feec7f164e031aecd70701c13009d277214e617",
    "looks-design.yaml":
        "sha256:43b66735b7630a74c3ff38235605ee316e40edf0db3d901cda34ab79c799dccf",
    "looks-futility.yaml":
        "sha256:7977baa51091292413b0fae9545d221265dcff436355e742489cdf001b0ed855",
    "looks-holm.yaml":
        "sha256:1297563171c9676ded36bac128595855033bcdc45dfe2abc42938475bf4bc218",
    "monte-carlo.yaml":
        "sha256:97af07625cf44fd5602e16331ed9c6f2f9033ba8190a8dba7960aa5ef5cb954d",
    "sensitivity-stratified.yaml":
        "sha256:4c03bede1068d382113123f5b254dd89e1eae8472f6230dc70d28b3b8994d7ef",
    "sensitivity.yaml":
        "sha256:7fa6da1f9b841f2713ff6b4ee263a0801055a67417c57abe1c84d3419c4402c0",
    "source-database.yaml":
        "sha256:199ed3c9fb7dcf6f63997d5c243fa210986667509c52b2e778909ba93e3fca21",
    "source-files.yaml":
        "sha256:42737e846a776b33fa9f4dd2d3d5085d407fddc6333fbd8e45b5c2a0abd8864e",
    "wound-dressing-variant.yaml":
        "sha256:b2a38785af62c9466ec8977868b7ca774a10d8edb5d16b1bcd589a02305bdca9",
}


def golden_path(name: str) -> Path:
    return ROOT / name if name.startswith("plans/") else FROZEN / name


def test_every_frozen_plan_has_a_golden_fingerprint() -> None:
    frozen = {p.name for p in FROZEN.glob("*.yaml")}
    examples = {f"plans/{p.name}" for p in (ROOT / "plans").glob("*.yaml")}
    assert frozen | examples == set(GOLDEN)


@pytest.mark.parametrize("name", list(GOLDEN))
def test_golden_fingerprint(name: str) -> None:
    loaded = load_plan(golden_path(name))
    assert loaded.fingerprint == GOLDEN[name]
    # the lock stores the resolved plan; rebuilt from it, the plan resolves to the same bytes
    assert resolve(plan_from_resolved(loaded.resolved)) == loaded.resolved
    assert fingerprint(loaded.resolved) == GOLDEN[name]


def lock_versions() -> list[tuple[str, dict]]:
    out = []
    for lock in sorted(STUDIES.rglob("*.lock.json")):
        doc = json.loads(lock.read_text("utf-8"))
        for version in doc["versions"]:
            out.append((f"{lock.relative_to(STUDIES)} v{version['version']}", version))
    return out


@pytest.mark.parametrize("name,version", lock_versions(), ids=[n for n, _ in lock_versions()])
def test_a_plan_locked_by_an_earlier_version_rebuilds_to_what_its_lock_stores(
        name: str, version: dict) -> None:
    plan = plan_from_resolved(version["plan"], source=name)
    assert resolve(plan) == version["plan"]
    assert fingerprint(resolve(plan)) == version["fingerprint"]
