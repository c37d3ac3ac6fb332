import shutil
from pathlib import Path

import pytest

import edgetally
from edgetally.planner.choose import SCHEMES

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
EXAMPLE_FILES = sorted(EXAMPLES.glob("*.toml"))


def _all_designs():
    """Every example with its chosen scheme ("auto") and with every scheme forced that is feasible
    on it, by id "<example>:<scheme>"."""
    out = {}
    for p in EXAMPLE_FILES:
        spec = edgetally.load_spec(p)
        out[f"{p.stem}:auto"] = edgetally.design(spec)
        for scheme in SCHEMES:
            try:
                out[f"{p.stem}:{scheme}"] = edgetally.design(spec, scheme=scheme)
            except edgetally.SpecError:
                pass
    return out


ALL_DESIGNS = _all_designs()


@pytest.fixture(scope="session")
def hosts():
    """Host builds of the emitted C, made once per session: fill with ``host_for``."""
    return {}


def host_for(hosts: dict, key: str):
    """The host build of ALL_DESIGNS[key] (built on first use)."""
    if key not in hosts:
        from edgetally.check import hostbuild

        hosts[key] = hostbuild.build(ALL_DESIGNS[key])
    return hosts[key]


@pytest.fixture(scope="session")
def designs():
    """Every bundled example's chosen Design, by file stem."""
    return {k.split(":")[0]: d for k, d in ALL_DESIGNS.items() if k.endswith(":auto")}


def host_cc() -> str | None:
    """The desktop C compiler the tests compile small harnesses with, or None."""
    from edgetally.check import hostbuild

    for name in (hostbuild.compiler(), "cc", "gcc"):
        if name and shutil.which(name):
            return name
    return None
