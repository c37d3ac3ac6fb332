"""edgetally: firmware FM demodulators that count the edges of a limited IF signal.

The API is pure (nothing prints or writes files):
    edgetally.load_spec(path) -> Spec, edgetally.plan(spec) -> Plan, edgetally.design(spec) -> Design,
    edgetally.emit.emit(design) -> {filename: text}, edgetally.verify.verify(design, ...) -> VerifyResult
(emit and verify are reached through their modules, whose names they share.)

Names that need scipy or cffi are imported on first use, so that reading and checking a spec
stays fast.
"""

__version__ = "0.1.0"

from typing import TYPE_CHECKING, Any

from .spec import Spec, SpecError, load_spec, parse_spec

if TYPE_CHECKING:  # the lazy names below, for type checkers
    from .designer.assemble import design as design
    from .ir import Design as Design
    from .planner.choose import Plan as Plan
    from .planner.choose import plan as plan

_LAZY = {
    "Plan": ("planner.choose", "Plan"),
    "plan": ("planner.choose", "plan"),
    "design": ("check.choice", "design"),
    "Design": ("ir", "Design"),
}

__all__ = ["Spec", "SpecError", "load_spec", "parse_spec", "__version__", *_LAZY]


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        import importlib

        module, attr = _LAZY[name]
        value = getattr(importlib.import_module(f".{module}", __name__), attr)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'edgetally' has no attribute {name!r}")
