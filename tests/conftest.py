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


# The words of the scale, offset-tracker and output stage (ir.Scale.product and .word) and of the
# squelch level (ir.Squelch.level_bits) are branches of the emitted C of their own: each form not
# met above is forced here on the narrow design by replacing those fields of its Design (the model
# reads the same Design, so bit-exactness is still the check). The one-product form needs
# |y - centre| mult below 2^31: the multiplier is cut (and the shift with it) until it is.
def scale_forms(d):
    import dataclasses

    sc = d.scale
    d_max = max(sc.centre, next(r.bound for r in d.certificate if r.name == "cic.output") - sc.centre)
    k = max(0, (d_max * sc.mult).bit_length() - 30)
    s32 = dataclasses.replace(sc, product="s32", mult=sc.mult >> k, shift=sc.shift - k)
    assert d_max * s32.mult + (1 << (s32.shift - 1)) < 1 << 31 and s32.shift >= 1
    return {
        "s32-w32": dataclasses.replace(d, scale=s32),
        "s32-w64": dataclasses.replace(d, scale=dataclasses.replace(s32, word=64)),
        "s64-w32": dataclasses.replace(d, scale=dataclasses.replace(sc, product="s64")),
        "s64-w64": dataclasses.replace(d, scale=dataclasses.replace(sc, product="s64", word=64)),
        "split-w64-level64": dataclasses.replace(d, scale=dataclasses.replace(sc, word=64),
                                                 squelch=dataclasses.replace(d.squelch, level_bits=64)),
    }
