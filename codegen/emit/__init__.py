"""Design -> C source text (jinja2 templates in edgetally.c_templates): the public functions of the
emitted C (``api``), the header and source (``emit``) and the desktop unit test (``unit_test``)."""

from .deviations import DEVIATIONS, Deviation
from .render import (
    Function,
    Vectors,
    api,
    banner,
    emit,
    file_names,
    input_type,
    internal_functions,
    isr_names,
    test_dir,
    unit_test,
)

__all__ = [
    "DEVIATIONS",
    "Deviation",
    "Function",
    "Vectors",
    "api",
    "banner",
    "emit",
    "file_names",
    "input_type",
    "internal_functions",
    "isr_names",
    "test_dir",
    "unit_test",
]
