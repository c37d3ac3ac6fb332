"""Design -> C source text (jinja2 templates in edgetally.c_templates): the public functions of the
emitted C (``api``), the header and source (``emit``) and the desktop unit test (``unit_test``)."""

from .render import Function, Vectors, api, banner, emit, input_type, isr_names, unit_test

__all__ = ["Function", "Vectors", "api", "banner", "emit", "input_type", "isr_names", "unit_test"]
