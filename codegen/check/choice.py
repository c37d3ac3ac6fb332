"""Choice by measurement where the planner's formulas are unsure.

``settle(spec)`` plans as ``edgetally.plan`` does, then simulates briefly (the float reference of
each option on SIM_SECONDS of the standard test, deterministic seed) every feasible option that is
marked doubtful or predicted within CLOSE_DB of the chosen one, and chooses on the simulated
figure: cheapest first, a costlier option wins only by more than the planner's tie margin (between options
equal in cost within the cycle tables' accuracy, the better simulated figure wins), so no option is
chosen whose simulated SINAD is below that of a clearly cheaper contender. The plan's notes say
which simulated figures decided.

``design(spec)`` makes the settled plan's design and checks its filter arithmetic by simulation
as well: where the cheaper arithmetic was picked on its predicted loss, the integer model's
simulated loss against the float reference must also meet the spec's limit, else the next
arithmetic is taken (and the note says why).
"""

from __future__ import annotations

import dataclasses

from . import model, reference
from ..designer import assemble
from ..ir import Design
from ..measure import metrics
from ..planner import schemes
from ..planner.choose import TIE_DB, Option, Plan, plan
from ..spec import Spec, SpecError
from ..stimulus.inputs import DEFAULT_SEED, make_inputs

CLOSE_DB = 3.0  # options predicted within this of the chosen one are simulated before choosing
# A doubtful prediction (a grid faster than the stamps, count errors that form tones) was seen off by
# up to about 15 dB in either direction on the bundled examples (plan --simulate); doubtful options
# predicted further below the chosen one than that cannot win and are not simulated.
DOUBT_DB = 15.0
# The calibrated cycle tables hold the planned loads within a few per cent of the emulated ones
# (tests/test_cost_tables.py bounds them at 10 %): options closer in load than this are equal in cost.
COST_TIE = 0.03
SIM_SECONDS = 0.2  # of the standard test, after its lead-in: enough tone periods for the SINAD meter


def _sinad(design: Design, samples) -> float:
    test = design.test
    skip = int(round(test.lead_s * design.rates.out_hz))
    return metrics.sinad_db(samples[skip:], design.rates.out_hz, test.tone_hz, test.band_lo_hz, test.band_hi_hz)


def _seconds(design: Design, seconds: float) -> float:
    """``seconds``, or the standard test's shortest measurable record for a low band."""
    return max(seconds, design.test.min_seconds)


def simulate_option(
    spec: Spec, o: Option, seconds: float = SIM_SECONDS, seed: int = DEFAULT_SEED, arith: str | None = None
) -> float:
    """SINAD of the float reference of plan option ``o`` (of a plan priced with ``arith``) on
    ``seconds`` of the standard test."""
    # the float reference does not depend on the filter arithmetic: one (wide) is designed, not all
    d = assemble.design(
        spec, plan(spec, scheme=o.scheme, variant=o.variant, ratio=o.ratio, arith=arith), overrides={"arith": "wide"}
    )
    return _sinad(d, reference.run(d, make_inputs(d, _seconds(d, seconds), seed)))


def simulate_options(
    spec: Spec, plan_obj: Plan, seconds: float = 0.25, seed: int = DEFAULT_SEED
) -> dict[tuple[str, str], float]:
    """SINAD of the float reference of every feasible option row of a plan (``plan --simulate``)."""
    return {
        (o.scheme, o.variant): round(simulate_option(spec, o, seconds, seed, plan_obj.arith), 2)
        for o in plan_obj.options
        if o.feasible
    }


def settle(
    spec: Spec,
    scheme: str | None = None,
    seconds: float = SIM_SECONDS,
    seed: int = DEFAULT_SEED,
    arith: str | None = None,
) -> Plan:
    """The plan, with the choice among doubtful or close options made on simulated SINAD; ``arith``
    prices the filter sections with that arithmetic (planner.choose.plan)."""
    p = plan(spec, scheme, arith=arith)
    chosen = next(o for o in p.options if o.kept)
    top = (
        max(o.predicted_sinad_db for o in p.options if o.feasible and not o.doubtful)
        if any(o.feasible and not o.doubtful for o in p.options)
        else chosen.predicted_sinad_db
    )
    contenders = [
        o
        for o in p.options
        if o.feasible and (o is chosen or o.predicted_sinad_db >= top - (DOUBT_DB if o.doubtful else CLOSE_DB))
    ]
    if len(contenders) < 2:
        return p
    sims = {o: simulate_option(spec, o, seconds, seed, arith) for o in contenders}
    best = None
    for o in sorted(contenders, key=lambda o: o.load):
        # loads within COST_TIE of each other cost the same as far as the cycle tables can tell:
        # between those the better simulated SINAD wins; a costlier option must gain over TIE_DB
        same_cost = best is not None and o.load <= best.load * (1 + COST_TIE)
        if best is None or sims[o] > sims[best] + (0.0 if same_cost else TIE_DB):
            best = o
    figures = ", ".join(
        f"{o.scheme} {o.variant} {sims[o]:.1f} dB (predicted {o.predicted_sinad_db:.1f}, CPU {o.load:.1%})"
        for o in sorted(contenders, key=lambda o: o.load)
    )
    note = (
        f"chosen on simulated SINAD (float reference, {seconds:g} s of the standard test): {figures}; "
        f"{best.scheme} {best.variant} "
        + ("confirms the formulas' choice" if best is chosen else f"replaces {chosen.scheme} {chosen.variant}")
    )
    rows = []
    for o in p.options:
        if o in sims:
            if o is best:
                reason = f"CHOSEN: best simulated SINAD {sims[o]:.1f} dB (a costlier option must gain over {TIE_DB} dB)"
            else:
                reason = f"dropped: simulated SINAD {sims[o]:.1f} dB, not better by the tie margin"
            o = dataclasses.replace(o, kept=o is best, reason=reason)
        rows.append(o)
    if best is chosen:
        return dataclasses.replace(p, options=tuple(rows), notes=p.notes + (note,))
    q = plan(spec, scheme=best.scheme, variant=best.variant, ratio=best.ratio, arith=arith)
    notes = tuple(n for n in q.notes if not n.startswith("scheme forced")) + (note,)
    if scheme is not None:
        notes += (f"scheme forced to {scheme}",)
    return dataclasses.replace(q, options=tuple(rows), notes=notes)


def simulated_loss_db(design: Design, seconds: float = SIM_SECONDS, seed: int = DEFAULT_SEED) -> float:
    """Float reference SINAD (rounded to the output word) minus the integer model's, on ``seconds``
    of the standard test."""
    x = make_inputs(design, _seconds(design, seconds), seed)
    ref = _sinad(design, reference.output_word(design, reference.run(design, x)))
    got = _sinad(design, model.run(design, x).out)
    # equal figures lose nothing, infinite ones too (both records noise-free, or both without the
    # tone: a deviation under one output LSB)
    return 0.0 if ref == got else ref - got


def design(spec: Spec, chosen: Plan | None = None, scheme: str | None = None, overrides: dict | None = None) -> Design:
    """The design edgetally makes for ``spec``: the settled plan's, its arithmetic confirmed by
    simulation. ``chosen`` (a plan) or ``overrides`` (word lengths, as for ``widths --set``) take
    the choice out of its hands: the design is then made from them as given."""
    if chosen is not None or overrides:
        return assemble.design(spec, chosen, scheme=scheme, overrides=overrides)
    return design_and_plan(spec, scheme)[0]


def design_and_plan(
    spec: Spec,
    scheme: str | None = None,
    chosen: Plan | None = None,
    seconds: float = SIM_SECONDS,
    seed: int = DEFAULT_SEED,
) -> tuple[Design, Plan]:
    """The design of the settled plan (or of ``chosen``), its arithmetic confirmed by simulated loss.

    The planner prices the sections with the arithmetic the designer falls back to (its roundoff
    is negligible at any quality it can promise); the designer may then take a cheaper one. Where
    that frees CPU time an option needed (one was dropped for its load, or no option fit at all),
    the plan is made again with the cheaper arithmetic's cost, and its design is kept when that
    arithmetic passes the simulated loss there too."""
    if chosen is not None:
        return _confirmed(spec, chosen, seconds, seed)
    cheap = _cheaper_arith(spec)
    try:
        p = settle(spec, scheme, seconds, seed)
    except SpecError as refused:
        if cheap is None:
            raise
        try:
            d, q = _confirmed(spec, settle(spec, scheme, seconds, seed, arith=cheap), seconds, seed)
        except SpecError:
            raise refused from None
        if arith_name(d) != cheap or d.budget.load_fraction > spec.target.cpu_budget:
            raise refused from None
        note = (
            f"planned with the {cheap} arithmetic's cost (the design's): priced with the {schemes.fallback_arith(spec.target)} "
            f"arithmetic, no option fits the budget"
        )
        return d, dataclasses.replace(q, notes=q.notes + (note,))
    d, p = _confirmed(spec, p, seconds, seed)
    name = arith_name(d)
    dropped = [o for o in p.options if not o.feasible and "CPU load" in o.reason]
    if name != cheap or not dropped or d.budget.cycles_per_output >= p.load.per_output:
        return d, p
    try:
        q = settle(spec, scheme, seconds, seed, arith=name)
        if (q.scheme, q.variant, q.ratio) == (p.scheme, p.variant, p.ratio):
            return d, p
        d2, q = _confirmed(spec, q, seconds, seed)
    except SpecError:  # the new choice's design refuses a [fixed] target: keep the first
        return d, p
    if arith_name(d2) != name or d2.budget.load_fraction > spec.target.cpu_budget:
        return d, p
    note = (
        f"planned again with the {name} arithmetic's cost (the design's): {q.scheme} {q.variant} R={q.ratio} "
        f"replaces {p.scheme} {p.variant} R={p.ratio}, which was chosen while options were priced with the "
        f"{schemes.fallback_arith(spec.target)} arithmetic"
    )
    return d2, dataclasses.replace(q, notes=q.notes + (note,))


def _cheaper_arith(spec: Spec) -> str | None:
    """The arithmetic the designer may take below the planner's price: the shaped one, where the
    spec leaves the choice to it and the core offers it (designer.assemble.auto_ariths)."""
    return "shaped" if spec.fixed.arith == "auto" and "shaped" in assemble.auto_ariths(spec.target) else None


def _confirmed(spec: Spec, p: Plan, seconds: float, seed: int) -> tuple[Design, Plan]:
    """The design of plan ``p``, its arithmetic confirmed by simulated loss (the cheapest whose
    integer model meets the spec's loss limit), and ``p`` with a note on the arithmetic."""
    d = assemble.design(spec, p)
    if spec.fixed.arith != "auto":
        return d, p
    tried = []
    opts = assemble.width_options(spec, p)
    for opt in opts:
        if not opt.ok:
            continue
        cand = d if opt.arith == arith_name(d) else assemble.design(spec, p, overrides={"arith": opt.arith})
        loss = simulated_loss_db(cand, seconds, seed)
        tried.append(f"{opt.arith} {loss:.2f} dB")
        if loss <= spec.fixed.loss_limit_db:
            # the cheaper arithmetics the predictions refused, and by which figure
            refused = [
                f"{o.arith} ({o.chain_cycles} cycles: {o.reason})"
                for o in opts
                if not o.ok and o.filters is not None and o.chain_cycles < opt.chain_cycles
            ]
            if refused:
                p = dataclasses.replace(
                    p, notes=p.notes + (f"filter arithmetic {opt.arith}; cheaper ones refused: {'; '.join(refused)}",)
                )
            if cand is not d:
                p = dataclasses.replace(
                    p,
                    notes=p.notes
                    + (
                        f"filter arithmetic {opt.arith}: the simulated implementation loss of the cheaper arithmetic "
                        f"exceeds {spec.fixed.loss_limit_db:g} dB ({'; '.join(tried)})",
                    ),
                )
            return cand, p
    note = (
        f"no filter arithmetic meets the {spec.fixed.loss_limit_db:g} dB loss limit in simulation ({'; '.join(tried)})"
    )
    return d, dataclasses.replace(p, notes=p.notes + (note,))


def arith_name(d: Design) -> str:
    """The name of the filter arithmetic of ``d`` (a key of edgetally.designer.wordlength.ARITHS)."""
    from ..designer.wordlength import ARITHS

    f = d.filters
    if f.shaped:  # its data width follows its coefficient format (designer.assemble._shaped_words)
        return "shaped"
    return next(
        name
        for name, a in ARITHS.items()
        if (a.data_bits, a.coef_width, a.acc_bits, a.shaped) == (f.data_bits, f.coef_width, f.acc_bits, f.shaped)
    )


def chain_summary(d: Design, p: Plan) -> str:
    """One line on the design's output chain and its CPU figure (plan and report print it): the
    option rows of ``p`` are priced with the arithmetic ``p.arith`` names (for "auto" the one the
    designer falls back to, planner.schemes.planned_filter_cycles), the design with the one it took."""
    f, b = d.filters, d.budget
    feedback = ", error feedback" if f.shaped else ""
    line = (
        f"output chain: {arith_name(d)} arithmetic ({f.data_bits}-bit data, Q{f.coef_bits} coefficients{feedback}), "
        f"{len(f.sections)} sections; the design's CPU estimate {b.cycles_per_output}/output sample = "
        f"{b.load_fraction:.1%}"
    )
    if b.cycles_per_output != p.load.per_output:
        priced = "the fallback arithmetic" if p.arith == "auto" else f"the {p.arith} arithmetic"
        line += f" (the option rows are priced with {priced}'s {p.load.per_output})"
    return line
