"""Plan refinement by simulation: the float reference of every feasible option of a plan run on a
short standard test, the measurement that ``plan --simulate`` shows beside the formulas."""

from __future__ import annotations

from ..check import reference
from ..measure import metrics
from ..stimulus.inputs import DEFAULT_SEED, make_inputs


def simulate_options(spec, plan_obj, seconds: float = 0.25, seed: int = DEFAULT_SEED) -> dict[tuple[str, str], float]:
    """SINAD of the float reference of every feasible option row of a plan, from a short
    simulation: the refinement of the planner's formulas that ``plan --simulate`` shows."""
    from ..designer.assemble import design as make_design
    from .choose import plan

    out = {}
    for o in plan_obj.options:
        if not o.feasible:
            continue
        d = make_design(spec, plan(spec, scheme=o.scheme, variant=o.variant, ratio=o.ratio))
        inputs = make_inputs(d, seconds, seed)
        ref = reference.run(d, inputs)
        test = d.test
        skip = int(round(test.lead_s * d.rates.out_hz))
        out[(o.scheme, o.variant)] = round(metrics.sinad_db(ref[skip:], d.rates.out_hz, test.tone_hz,
                                                            test.band_lo_hz, test.band_hi_hz), 2)
    return out
