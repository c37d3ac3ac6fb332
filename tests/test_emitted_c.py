"""The emitted C itself: strict-flag builds with every compiler at hand, integer only, and the
header's promises."""

import re
import shutil
import subprocess

import pytest

import edgetally
from edgetally.emit import api, emit, isr_names
from edgetally.check.hostbuild import STRICT_FLAGS

from conftest import EXAMPLE_FILES

COMPILERS = [c for c in ("gcc", "clang") if shutil.which(c)]


@pytest.fixture(scope="module", params=EXAMPLE_FILES, ids=lambda p: p.stem)
def emitted(request, tmp_path_factory):
    d = edgetally.design(edgetally.load_spec(request.param))
    folder = tmp_path_factory.mktemp(d.name)
    files = emit(d)
    for name, text in files.items():
        (folder / name).write_text(text)
    return d, folder, files


@pytest.mark.parametrize("cc", COMPILERS)
@pytest.mark.parametrize("opt", ["-O0", "-O2", "-Os"])
def test_strict_build(emitted, cc, opt):
    """Warning-free under the strict flags (-Werror makes any warning a failure)."""
    d, folder, _ = emitted
    res = subprocess.run([cc, *STRICT_FLAGS, opt, "-c", str(folder / f"{d.name}.c"), "-o", str(folder / "x.o")],
                         capture_output=True, text=True)
    assert res.returncode == 0, res.stderr
    assert res.stderr == ""


def test_both_compilers_present_in_ci():
    """CI installs clang next to gcc (.ci/run); locally a missing clang only skips its builds."""
    import os
    if os.environ.get("CI") == "true":
        assert COMPILERS == ["gcc", "clang"]


def test_integer_only_and_no_heap(emitted):
    _, _, files = emitted
    for name, text in files.items():
        code = re.sub(r"/\*.*?\*/", "", text, flags=re.S)
        assert not re.search(r"\b(float|double|long double|malloc|calloc|free)\b", code), name
        assert re.search(r"#include <(math|stdlib|stdio)\.h>", code) is None, name


def _body(src, name):
    """The body of C function ``name`` (one-line or multi-line), comments removed."""
    m = re.search(r"\b%s\([^)]*\)\s*\{" % name, src)
    depth, i = 1, m.end()
    while depth:
        depth += {"{": 1, "}": -1}.get(src[i], 0)
        i += 1
    return re.sub(r"/\*.*?\*/", "", src[m.end():i - 1], flags=re.S)


def test_no_division_in_the_isrs(emitted):
    """The functions an interrupt calls, and the queue they share, neither divide nor multiply."""
    d, _, files = emitted
    src = files[f"{d.name}.c"]
    isrs = isr_names(d)
    assert isrs
    for name in isrs + [f"{d.name}_queue"]:
        body = _body(src, name)
        assert "/" not in body and "*" not in body.replace("*s", ""), name


def test_names_carry_the_prefix(emitted):
    d, _, files = emitted
    hdr = files[f"{d.name}.h"]
    for fn in re.findall(r"^\w[\w\s\*]*?\b(\w+)\(", hdr, flags=re.M):
        assert fn.startswith(d.name + "_"), fn
    for macro in re.findall(r"^#define (\w+)", hdr, flags=re.M):
        assert macro.startswith(d.name.upper() + "_"), macro


def test_header_documents_events_and_banner(emitted):
    d, _, files = emitted
    hdr = files[f"{d.name}.h"]
    assert f"edgetally {d.tool_version}" in hdr and d.spec_hash in hdr
    assert "Which hardware event calls what" in hdr
    for f in api(d):
        assert f.proto + ";" in hdr                          # every public function, documented
    assert f"{d.name}_process" in hdr and "_isr(" in hdr
    assert not re.search(r"\b20\d\d-\d\d-\d\d\b", hdr)      # no timestamps: output is reproducible
