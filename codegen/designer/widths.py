"""check_widths(spec, ...) -> WidthReport: the word-length table of a design and the checks of the
user's own word lengths (``--set filters.KEY=VALUE``): overflow bound of every register, predicted
and simulated noise, response error, limit cycles."""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

from . import assemble
from ..dsp import cic
from . import wordlength
from ..planner import schemes
from ..ir import Design
from ..planner.choose import Plan, plan
from ..spec import Spec, SpecError


@dataclass(frozen=True)
class WidthReport:
    name: str
    arith: str
    overrides: dict
    registers: list  # the certificate, as dicts
    predicted_loss_db: float
    response_error_db: float
    coef_bits_needed: int
    limit_cycles: list  # per section: measured dead band (its LSB), Jackson's estimate, in output LSB
    simulated_loss_db: float | None
    bit_exact: bool | None
    cic: dict = field(default_factory=dict)
    failures: list = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.failures

    def to_dict(self) -> dict:
        return {**asdict(self), "ok": self.ok}


def parse_sets(items: list[str]) -> dict:
    """``filters.KEY=VALUE`` strings -> overrides; SpecError naming the bad item."""
    out: dict = {}
    for item in items:
        key, sep, value = item.partition("=")
        if not sep or not key.startswith("filters."):
            raise SpecError(
                "--set", item, "must look like filters.KEY=VALUE, KEY one of " + ", ".join(assemble.OVERRIDABLE)
            )
        name = key[len("filters.") :]
        if name not in assemble.OVERRIDABLE:
            raise SpecError("--set", item, "KEY must be one of " + ", ".join(assemble.OVERRIDABLE))
        if assemble.OVERRIDABLE[name] is int:
            try:
                out[name] = int(value)
            except ValueError:
                raise SpecError("--set", item, "needs a whole number") from None
        else:
            out[name] = value
    allowed = {
        "data_bits": (16, 27, 32),
        "coef_width": (16, 32),
        "acc_bits": (32, 48, 64),
        "arith": ("narrow", "shaped", "mid", "wide"),
        "scaling": ("l1", "l2", "linf"),
    }
    for name, choices in allowed.items():
        if name in out and out[name] not in choices:
            raise SpecError("--set", f"filters.{name}={out[name]}", "must be one of " + ", ".join(map(str, choices)))
    if "coef_bits" in out and not 4 <= out["coef_bits"] <= 30:
        raise SpecError("--set", f"filters.coef_bits={out['coef_bits']}", "must be from 4 to 30")
    return out


def _limit_cycles(d: Design, noise_fs2: float) -> list[dict]:
    """Measured zero-input dead band of each section, Jackson's estimate, and how far the idle tone
    it makes (amplitude in full-scale units, the later low-pass sections taken at unit gain) lies
    below the demodulator's own in-band noise."""
    f = d.filters
    rows = []
    for s, m in zip(f.sections, wordlength.limit_cycle_lsb(f), strict=True):
        idle = (m * 2.0**-s.q_out) ** 2 / 2
        below = 10 * math.log10(noise_fs2 / idle) if idle else math.inf
        rows.append(
            {
                "section": s.role,
                "dead_band_lsb": m,
                "jackson_lsb": round(wordlength.jackson_dead_band(s, f.coef_bits), 2),
                "below_noise_db": round(below, 1),
            }
        )
    return rows


def check_widths(
    spec: Spec,
    scheme: str | None = None,
    overrides: dict | None = None,
    simulate: bool = True,
    seconds: float = 0.3,
    chosen: Plan | None = None,
) -> WidthReport:
    """The width table and every check; ``simulate`` also runs the emitted C against the model and
    the float reference (skipped when a register could overflow: such C would be undefined).
    ``chosen``: the plan to check (default: the planner's)."""
    p = chosen or plan(spec, scheme)
    d = assemble.design(spec, p, overrides=overrides)
    opts = assemble.width_options(spec, p, overrides)
    opt = next(o for o in opts if o.filters == d.filters)
    fx = spec.fixed
    failures = [
        f"{r.name}: bound {r.bound} does not fit {r.bits} bits (margin {r.margin_bits} bits)"
        for r in d.certificate
        if r.margin_bits < 0 and not r.name.endswith(".out")
    ]
    if d.filters.scaling == "l1":
        failures += [
            f"{r.name}: bound {r.bound} exceeds the {r.bits}-bit data limit"
            for r in d.certificate
            if r.margin_bits < 0 and r.name.endswith(".out")
        ]
    if opt.loss_db > fx.loss_limit_db:
        failures.append(f"predicted implementation loss {opt.loss_db:.2f} dB exceeds {fx.loss_limit_db:g} dB")
    if opt.response_error_db > fx.response_tol_db:
        failures.append(f"response error {opt.response_error_db:.3f} dB exceeds {fx.response_tol_db:g} dB")
    noise_fs2 = schemes.TEST_LEVEL**2 / 2 * 10 ** (-p.prediction.sinad_db / 10)
    cycles = _limit_cycles(d, noise_fs2)
    failures += [
        f"limit cycle in {c['section']}: idle tone {-c['below_noise_db']:.1f} dB above the noise floor"
        for c in cycles
        if c["below_noise_db"] < 0
    ]
    sim_loss = bit_exact = None
    overflow = any(r.margin_bits < 0 and not r.name.endswith(".out") for r in d.certificate)
    if simulate and not overflow:
        from ..check.verify import verify

        res = verify(d, seconds=seconds)
        sim_loss, bit_exact = res.implementation_loss_db, res.bit_exact
        if sim_loss > fx.loss_limit_db:
            failures.append(f"simulated implementation loss {sim_loss:.2f} dB exceeds {fx.loss_limit_db:g} dB")
        if not bit_exact:
            failures.append("the emitted C differs from the integer model")
    c, out_hz, band = d.cic, d.rates.out_hz, d.audio_hz
    cic_info = {
        "order": c.order,
        "ratio": c.ratio,
        "in_bits": c.in_bits,
        "register_bits": c.width,
        "full_width": cic.full_width(c.in_bits, c.order, c.ratio),
        "droop_db_at_band_edge": round(cic.droop_db(band, out_hz, c.order, c.ratio), 3),
        "compensated": any(s.role == "droop" for s in d.filters.sections),
        "worst_alias_db": round(float(cic.response_db((out_hz - band) / out_hz, c.order, c.ratio)), 2),
        # Hogenauer's pruned register widths (eq. 21) if the output were kept to the data word: shown
        # so that the user sees what pruning would give; every register is a 32-bit word anyway
        "pruned_widths": cic.pruned_widths(
            c.in_bits, min(cic.full_width(c.in_bits, c.order, c.ratio), d.filters.data_bits), c.order, c.ratio
        ),
        "pruning": "not applied: every CIC register is a 32-bit word on these targets, so Hogenauer's "
        "pruning would save no storage or cycles",
    }
    return WidthReport(
        name=spec.name,
        cic=cic_info,
        arith=opt.arith,
        overrides=dict(overrides or {}),
        registers=[asdict(r) for r in d.certificate],
        predicted_loss_db=round(opt.loss_db, 3),
        response_error_db=round(opt.response_error_db, 4),
        coef_bits_needed=opt.coef_bits_needed,
        limit_cycles=cycles,
        simulated_loss_db=sim_loss,
        bit_exact=bit_exact,
        failures=failures,
    )
