"""edgetally: firmware FM demodulators that count the edges of a limited IF signal.

The API is pure (nothing prints or writes files):
    load_spec(path) -> Spec, plan(spec) -> Plan, design(spec) -> Design,
    emit(design) -> {filename: text}, verify(design, ...) -> VerifyResult
"""

__version__ = "0.1.0"

from .spec import Spec, SpecError, load_spec, parse_spec  # noqa: E402
from .planner import Plan, plan  # noqa: E402
from .build import design  # noqa: E402
from .ir import Design  # noqa: E402

__all__ = ["Spec", "SpecError", "load_spec", "parse_spec", "Plan", "plan", "design", "Design", "__version__"]
