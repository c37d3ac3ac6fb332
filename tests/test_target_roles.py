"""edgetally.emit.internal_functions names functions the emitted C defines, so that the cycle
attribution of edgetally.target.cycles cannot silently lose a role when a template renames one."""

import re

import pytest

from edgetally.emit import emit, internal_functions

from conftest import ALL_DESIGNS


@pytest.mark.parametrize("key", sorted(ALL_DESIGNS))
def test_internal_functions_exist_in_the_emitted_c(key):
    d = ALL_DESIGNS[key]
    c = emit(d)[f"{d.name}.c"]
    defined = set(re.findall(r"^(?:static )?[\w ]+?\b(\w+)\([^;]*\)\s*$", c, flags=re.M))
    defined |= set(re.findall(r"^(?:static )?[\w ]+?\b(\w+)\([^;{]*\)\s*\{", c, flags=re.M))
    roles = internal_functions(d)
    assert set(roles) == {"output", "grid", "input"}
    names = [n for v in roles.values() for n in v]
    assert len(names) == len(set(names))
    for n in names:
        assert n in defined, n
