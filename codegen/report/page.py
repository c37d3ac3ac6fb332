"""The design report: one self-contained HTML page (CSS inline, plots inline as base64 PNG drawn
with matplotlib's Agg renderer, no script or file from elsewhere) that shows a design from plan to
listening test, with the WAV files beside it linked by name.

``render(ctx)`` returns the page's text; ``report_files(...)`` runs the listening clips through
the emitted C and returns every file of the report as {file name: bytes}. Nothing here writes
files or prints: the CLI does.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from .datalink import DataFigures

import html
import math
from dataclasses import dataclass

import numpy as np

from ..check.choice import chain_summary
from ..dsp import cic
from . import listen
from . import plots as report_plots
from ..measure.response import chain_response
from ..measure.squelch import describe
from ..ir import Design, Topology
from ..planner.choose import Plan
from ..spec import Spec
from ..stimulus.inputs import DEFAULT_SEED
from ..check.verify import VerifyResult

PAGE_OK = "edgetally-page-ok"


@dataclass(frozen=True, eq=False)
class ReportContext:
    """Everything the page shows. ``tone_out`` is the emitted C's output for the standard test
    tone (the spectrum plot); ``wav_names`` the WAV files written beside the page, with optional
    ``wav_captions`` in the same order."""

    spec: Spec
    plan: Plan
    design: Design
    verify: VerifyResult
    tone_out: np.ndarray
    sweeps: tuple = ()  # edgetally.sweeps.Sweep
    hostile: tuple = ()  # edgetally.hostile.ScenarioResult
    wav_names: tuple[str, ...] = ()
    wav_captions: tuple[str, ...] = ()
    data: DataFigures | None = None  # the data link's figures (data designs)

    @property
    def target(self) -> dict:
        """The emulated per-core figures of the verify result (empty when not run)."""
        return dict(self.verify.target or {})


# ---------------------------------------------------------------------------------------------
# small HTML helpers


def _e(v) -> str:
    return html.escape(str(v), quote=True)


def _hz(f: float) -> str:
    f = float(f)
    for unit, div in (("MHz", 1e6), ("kHz", 1e3)):
        if abs(f) >= div:
            return f"{f / div:.6g} {unit}"
    return f"{f:.6g} Hz"


def _db(v) -> str:
    if v is None:
        return "-"
    v = float(v)
    return "-" if math.isinf(v) else f"{v:.1f}"


def _yes(ok: bool, yes: str = "yes", no: str = "NO") -> str:
    return f'<span class="{"ok" if ok else "bad"}">{_e(yes if ok else no)}</span>'


def _table(head: list[str], rows: list[list[str]], row_classes: list[str] | None = None) -> str:
    """A table; cells are HTML already (escape text with _e before)."""
    out = ["<table>", "<tr>" + "".join(f"<th>{_e(h)}</th>" for h in head) + "</tr>"]
    for k, r in enumerate(rows):
        cls = f' class="{row_classes[k]}"' if row_classes and row_classes[k] else ""
        out.append(f"<tr{cls}>" + "".join(f"<td>{c}</td>" for c in r) + "</tr>")
    out.append("</table>")
    return "\n".join(out)


def _section(anchor: str, title: str, body: str) -> str:
    return f'<section id="{anchor}">\n<h2>{_e(title)}</h2>\n{body}\n</section>'


# ---------------------------------------------------------------------------------------------
# plots

# ---------------------------------------------------------------------------------------------
# sections


def _verdict(ctx: ReportContext) -> str:
    v = ctx.verify
    lines = []
    if v.bit_exact:
        lines.append(f"Emitted C vs integer model: {_yes(True, 'bit-exact')} over {v.samples} output samples.")
    else:
        lines.append(
            f"Emitted C vs integer model: {_yes(False, no='MISMATCH')}: {v.mismatches} samples differ "
            f"(first at {_e(v.first_mismatch)})."
        )
    lines.append(
        f"SINAD ({ctx.design.test.tone_hz:g} Hz tone at {ctx.design.test.level:.0%} deviation, "
        f"{_e(f'{ctx.design.audio_hz:g}')} Hz band): fixed point (C) {v.sinad_db:.1f} dB, "
        f"float reference {v.float_sinad_db:.1f} dB, predicted {v.predicted_sinad_db:.1f} dB; "
        f"implementation loss {v.implementation_loss_db:.2f} dB."
    )
    if v.squelch:
        lines.append("Noise " + _e("; ".join(s.strip() for s in describe(v.squelch))) + ".")
    if ctx.hostile:
        failed = [s.name for s in ctx.hostile if not s.passed]
        if failed:
            lines.append(
                f"Hostile conditions: {_yes(False, no=f'{len(failed)} of {len(ctx.hostile)} FAILED')} "
                f"({_e(', '.join(failed))})."
            )
        else:
            lines.append(f"Hostile conditions: {_yes(True, f'all {len(ctx.hostile)} passed')}.")
    else:
        lines.append("Hostile conditions: not run.")
    if ctx.sweeps:
        odd = [s.kind for s in ctx.sweeps if not s.bit_exact]
        lines.append(
            "Sweeps: "
            + (
                _yes(True, "every point bit-exact")
                if not odd
                else _yes(False, no="points NOT bit-exact in " + ", ".join(odd))
            )
            + "."
        )
    if ctx.target:
        cores = ", ".join(
            f"{_e(k)} {_yes(bool(t.get('bit_exact')), 'bit-exact', 'DIFFERS')}" for k, t in ctx.target.items()
        )
        lines.append(f"Cross-compiled and emulated: {cores}.")
    elif v.target_bit_exact is False:
        lines.append(f"Cross-compiled and emulated: {_yes(False, no='DIFFERS from the model')}.")
    return "\n".join(f"<p>{ln}</p>" for ln in lines)


def _header(ctx: ReportContext) -> str:
    d, p = ctx.design, ctx.plan
    nav = " | ".join(f'<a href="#{a}">{_e(t)}</a>' for a, t in SECTIONS)
    return (
        f"<header>\n<h1>Design report: {_e(d.name)}</h1>\n"
        f'<p class="sub">scheme {_e(p.scheme)} ({_e(p.variant)}), IF {_e(_hz(d.if_hz))}, full-scale deviation '
        f"{_e(_hz(d.full_scale_hz))}, audio to {_e(_hz(d.audio_hz))}, output {_e(_hz(d.rates.out_hz))} "
        f"{_e(d.output.format)}; {_e(d.budget.core)} at {_e(_hz(d.budget.cpu_hz))}; edgetally "
        f"{_e(d.tool_version)}, spec hash {_e(d.spec_hash)}</p>\n"
        f'<div class="verdict">\n{_verdict(ctx)}\n</div>\n<nav>{nav}</nav>\n</header>'
    )


def _plan_section(ctx: ReportContext) -> str:
    p, spec = ctx.plan, ctx.spec
    head = [
        "scheme",
        "variant",
        "R",
        "grid Hz",
        "CPU",
        "RAM B",
        "SINAD dB",
        "quant",
        "interp",
        "jitter",
        "feasible",
        "status",
    ]
    rows, cls = [], []
    for o in p.options:
        rows.append(
            [
                _e(o.scheme),
                _e(o.variant),
                str(o.ratio),
                str(o.grid_hz),
                f"{o.load:.1%}",
                str(o.ram_bytes),
                f"{o.predicted_sinad_db:.1f}{'?' if o.doubtful else ''}",
                _db(o.quant_sinad_db),
                _db(o.curvature_sinad_db),
                _db(o.jitter_sinad_db),
                _yes(o.feasible, "yes", "no"),
                _e(o.reason),
            ]
        )
        cls.append("chosen" if o.kept else "")
    pr, ld = p.prediction, p.load
    body = [
        _table(head, rows, cls),
        f"<p>Predicted SINAD {pr.sinad_db:.1f} dB ({ctx.design.test.tone_hz:g} Hz tone at {ctx.design.test.level:.0%} "
        f"deviation, {_e(f'{spec.signal.audio_hz:g}')} Hz band): quantisation {_db(pr.quant_sinad_db)}, "
        f"interpolation {_db(pr.curvature_sinad_db)}, jitter {_db(pr.jitter_sinad_db)}, 16-bit output "
        f"{_db(pr.output_sinad_db)} dB.</p>",
        f"<p>CPU estimate on {_e(spec.target.core)} at {_e(_hz(spec.target.cpu_hz))}: {ld.per_edge} cycles/edge "
        f"in ISRs, {ld.per_input}/input, {ld.per_grid}/grid instant, {ld.per_output}/output sample = "
        f"{ld.fraction:.1%} (budget {spec.target.cpu_budget:.0%}); about {ld.ram_bytes} bytes of state.</p>",
        f"<p>{_e(chain_summary(ctx.design, p))}.</p>",
    ]
    if p.notes:
        body.append("<ul>" + "".join(f"<li>{_e(n)}</li>" for n in p.notes) + "</ul>")
    body.append(
        '<p class="small">quant / interp / jitter: the SINAD that source alone would allow; "-": the '
        'source is absent; "?": the white-noise model may be several dB off for that option. The '
        "highlighted row is the chosen option.</p>"
    )
    return "\n".join(body)


def _box(title: str, lines: list[str]) -> str:
    return (
        f'<div class="box"><div class="bt">{_e(title)}</div>'
        + "".join(f"<div>{_e(ln)}</div>" for ln in lines)
        + "</div>"
    )


def _arrow(label: str) -> str:
    return f'<div class="arrow"><span>{_e(label)}</span><b>&#8594;</b></div>'


def _chain_section(ctx: ReportContext) -> str:
    d = ctx.design
    fr, c, sc, f, of, b, r = d.front, d.cic, d.scale, d.filters, d.output, d.budget, d.rates
    topo = d.topology
    if topo is Topology.CAPTURE:
        first = _box(
            "timer input capture",
            [
                f"{fr.timer_bits}-bit timer at {_hz(r.timer_hz)}",
                f"capture every {fr.prescale} edge(s)",
                "stamps by DMA" if b.dma else f"capture ISR, queue of {d.queue_len}",
            ],
        )
    elif topo is Topology.EDGE_STAMP:
        first = _box(
            "edge interrupt, reads a timer",
            [
                f"{fr.timer_bits}-bit timer at {_hz(r.timer_hz)}",
                f"latency jitter up to {b.irq_jitter_cycles} cycles",
                f"queue of {d.queue_len}",
            ],
        )
    elif topo is Topology.EDGE_COUNT:
        first = _box(
            "edge interrupt, counts", [f"{fr.counter_bits}-bit software count", "grid timer ISR queues the count"]
        )
    else:
        first = _box(
            "IF-clocked counter",
            [
                f"{fr.counter_bits}-bit hardware counter",
                "read every grid tick by " + ("DMA" if b.dma else "a tick ISR"),
            ],
        )
    if d.stamps:
        input_hz = b.edge_hz_max / fr.prescale
        front = _box(
            f"phase interpolation ({fr.order})",
            [
                f"grid {_hz(r.grid_hz)} ({fr.grid_ticks} ticks)",
                f"phase fraction {fr.phase_shift} bits",
                f"step limit {fr.x_limit}",
                f"gap above {fr.gap_ticks} ticks",
            ],
        )
        in_label = f"stamps up to {_hz(input_hz)}"
    else:
        front = _box(
            "count difference",
            [
                f"grid {_hz(r.grid_hz)} ({fr.grid_ticks} ticks)",
                f"step fraction {fr.step_shift} bits",
                f"at most {fr.diff_limit} per grid",
                f"gap after {fr.gap_run} empty reads",
            ],
        )
        in_label = f"counts at {_hz(r.grid_hz)}"
    full = cic.full_width(c.in_bits, c.order, c.ratio)
    cic_box = _box(
        "CIC decimator",
        [f"order {c.order}, ratio {c.ratio}", f"{c.in_bits}-bit input", f"{c.width}-bit registers (full width {full})"],
    )
    tc_ms = 2**sc.dc_shift / r.out_hz * 1e3
    scale_box = _box(
        "scale + offset tracker",
        [
            f"Q{sc.q} (full-scale deviation = 2^{sc.q})",
            f"x {sc.mult} >> {sc.shift}",
            f"offset time constant {tc_ms:.0f} ms",
        ],
    )
    sec_lines = [
        f"{f.data_bits}-bit data, Q{f.coef_bits} coef in {f.coef_width} bits, {f.acc_bits}-bit acc",
        f"{f.scaling} scaling",
    ]
    sec_lines += [f"{k}: {s.role}, out Q{s.q_out}" for k, s in enumerate(f.sections)]
    iir_box = _box(f"IIR sections ({len(f.sections)})", sec_lines)
    out_box = _box(
        "output", [f"{_hz(r.out_hz)}, {of.format} ({of.ctype})", f"mid-scale {of.mid}, range {of.lo}..{of.hi}"]
    )
    parts = [
        first,
        _arrow(in_label),
        front,
        _arrow(f"{c.in_bits}-bit steps at {_hz(r.grid_hz)}"),
        cic_box,
        _arrow(f"{_hz(r.out_hz)}"),
        scale_box,
        _arrow(f"{f.data_bits}-bit data"),
        iir_box,
        _arrow(f"{_hz(r.out_hz)}"),
        out_box,
    ]
    return (
        '<div class="chain">' + "".join(parts) + "</div>\n"
        f'<p class="small">IF edges arrive at up to {_e(_hz(b.edge_hz_max))} (IF plus peak deviation).</p>'
    )


def _response_section(ctx: ReportContext) -> str:
    d = ctx.design
    f = np.linspace(0.0, d.audio_hz, 512)
    q_db, f_db = chain_response(d, f)
    worst = float(np.max(np.abs(q_db - f_db)))
    return (
        report_plots.response_plot(d)
        + f"<p>Largest difference in the band (0 to {_e(f'{d.audio_hz:g}')} Hz): {worst:.4f} dB "
        f"(spec tolerance {ctx.spec.fixed.response_tol_db:g} dB). The dotted line marks the band edge.</p>"
    )


def _spectrum_section(ctx: ReportContext) -> str:
    n = int(np.asarray(ctx.tone_out).size)
    return (
        report_plots.spectrum_plot(ctx.design, ctx.tone_out)
        + f'<p class="small">The emitted C\'s output for the standard test tone, {n} samples '
        f"({n / ctx.design.rates.out_hz:.2f} s) after the settling lead, Hann window; 0 dBFS is a "
        "full-scale sine.</p>"
    )


def _sweeps_section(ctx: ReportContext) -> str:
    if not ctx.sweeps:
        return "<p>No sweeps were run.</p>"
    parts = []
    for s in ctx.sweeps:
        parts.append(f"<h3>{_e(s.label)}</h3>")
        parts.append(report_plots.sweep_plot(s) if s.points else "<p>No points.</p>")
        parts += [f'<p class="small">{_e(n)}</p>' for n in s.notes]
        rows = [
            [
                f"{p.x:g} {_e(s.unit)}",
                _yes(p.bit_exact),
                _db(p.sinad_db),
                _db(p.float_sinad_db),
                _db(p.snr_db),
                _db(p.thd_db),
                _db(p.level_db),
                _db(p.predicted_db),
                "-" if p.offset_hz is None else f"{p.offset_hz:.1f}",
                _e(", ".join(f"{k} {v}" for k, v in p.flags.items()) or "-"),
            ]
            for p in s.points
        ]
        parts.append(
            "<details><summary>points</summary>"
            + _table(
                ["x", "bit-exact", "SINAD", "float", "SNR", "THD", "level", "predicted", "offset Hz", "flags"], rows
            )
            + "</details>"
        )
    return "\n".join(parts)


def _hostile_section(ctx: ReportContext) -> str:
    if not ctx.hostile:
        return "<p>No hostile scenarios were run.</p>"
    head = [
        "scenario",
        "what was done",
        "flag expected",
        "raised",
        "bit-exact",
        "overflow-free",
        "output",
        "recovery ms (measured / predicted)",
        "result",
    ]
    rows, cls = [], []
    for s in ctx.hostile:
        rows.append(
            [
                _e(s.name),
                _e(s.description),
                _e(s.flag),
                _yes(s.flag_raised),
                _yes(s.bit_exact),
                _yes(s.overflow_free),
                _yes(s.output_ok, s.output_note, s.output_note),
                _yes(
                    s.recovery_ms <= s.predicted_recovery_ms,
                    f"{s.recovery_ms:.2f} / {s.predicted_recovery_ms:.2f}",
                    f"{s.recovery_ms:.2f} / {s.predicted_recovery_ms:.2f}",
                ),
                _yes(s.passed, "pass", "FAIL"),
            ]
        )
        cls.append("" if s.passed else "failed")
    plots = "".join(f'<div class="card">{report_plots.scenario_plot(s)}</div>' for s in ctx.hostile if s.trace_t_ms)
    return (
        _table(head, rows, cls)
        + (f'\n<div class="cards">{plots}</div>' if plots else "")
        + '\n<p class="small">Shaded: the disturbance. Output in fractions of full scale.</p>'
    )


def _budget_section(ctx: ReportContext) -> str:
    d, spec = ctx.design, ctx.spec
    b, r = d.budget, d.rates
    input_hz = d.input_hz_max
    edge = str(b.cycles_per_edge) if b.cycles_per_edge else "none (hardware or DMA)"
    kind = "stamp" if d.stamps else "count"
    rows = [
        ["edge ISR", _e(_hz(b.edge_hz_max)), edge],
        [f"input ({kind})", _e(_hz(input_hz)), str(b.cycles_per_input)],
        ["grid instant", _e(_hz(r.grid_hz)), str(b.cycles_per_grid)],
        ["output sample", _e(_hz(r.out_hz)), str(b.cycles_per_output)],
    ]
    budget = spec.target.cpu_budget
    width = min(100.0, 100.0 * b.load_fraction)
    mark = min(100.0, 100.0 * budget)
    over = b.load_fraction > budget
    parts = [
        f"<p>Estimated on {_e(b.core)} at {_e(_hz(b.cpu_hz))} ({_e(d.variant)}), at the highest edge rate:</p>",
        _table(["event", "rate up to", "cycles each (estimate)"], rows),
        f'<div class="bar"><div class="fill{" over" if over else ""}" style="width:{width:.1f}%"></div>'
        f'<div class="mark" style="left:{mark:.1f}%"></div></div>',
        f"<p>CPU load {b.load_fraction:.1%} of the budget line at {budget:.0%} "
        f"({_yes(not over, 'within', 'OVER')}); about {b.ram_bytes} bytes of state "
        f"(a queue of {d.queue_len} inputs included).</p>",
    ]
    if ctx.target:
        head = [
            "core",
            "bit-exact",
            "samples",
            "cycles/edge ISR",
            "/input",
            "/grid",
            "/output",
            "load",
            "flash B",
            "state B",
            "stack B",
            "method",
        ]
        cycles = ("cycles_per_edge_isr", "cycles_per_input", "cycles_per_grid", "cycles_per_output")
        trows = []
        for core, t in ctx.target.items():
            lf = t.get("load_fraction")
            trows.append(
                [
                    _e(core),
                    _yes(bool(t.get("bit_exact"))),
                    _e(t.get("samples", "-")),
                    *(_e(f"{t[k]:g}") if isinstance(t.get(k), (int, float)) else "-" for k in cycles),
                    "-" if lf is None else f"{lf:.1%}",
                    *(_e(t.get(k, "-")) for k in ("flash_bytes", "state_bytes", "stack_bytes", "cycle_method")),
                ]
            )
        parts += ["<h3>Measured on the target instruction set (emulated)</h3>", _table(head, trows)]
        ratios = [(core, t) for core, t in ctx.target.items() if t.get("float_ratio")]
        if ratios:
            parts.append(
                "<p>Against a hand-written double-precision version of the same chain, built for the same "
                "core and run in the same emulator (cycles per output sample over a whole block): "
                + "; ".join(
                    f"{_e(core)} {t['cycles_per_output_sample']:g} against "
                    f"{t['float_cycles_per_output_sample']:g}, {t['float_ratio']:.1f}x fewer"
                    for core, t in ratios
                )
                + ".</p>"
            )
    else:
        parts.append("<p>Target figures: not measured (needs the cross compiler and the emulator).</p>")
    return "\n".join(parts)


def _certificate_section(ctx: ReportContext) -> str:
    rows, cls = [], []
    for reg in ctx.design.certificate:
        rows.append(
            [
                _e(reg.name),
                str(reg.bits),
                str(reg.bound),
                _yes(reg.margin_bits >= 0, f"{reg.margin_bits:.2f}", f"{reg.margin_bits:.2f}"),
                _e(reg.note),
            ]
        )
        cls.append("" if reg.margin_bits >= 0 else "failed")
    return (
        _table(["register", "bits", "worst |value|", "margin (bits)", "why"], rows, cls)
        + '\n<p class="small">Worst value any edge pattern the spec allows can put in each register; a '
        "margin of 0 or more bits means it cannot overflow.</p>"
    )


def _listening_section(ctx: ReportContext) -> str:
    if not ctx.wav_names:
        return "<p>No listening files were written.</p>"
    parts = [
        "<p>Each file is the emitted C's output, compiled on this computer, for a simulated FM signal "
        f"({_e(_hz(ctx.design.rates.out_hz))}, 16-bit PCM).</p>"
    ]
    for k, name in enumerate(ctx.wav_names):
        cap = ctx.wav_captions[k] if k < len(ctx.wav_captions) else name
        parts.append(
            f'<div class="clip"><div>{_e(cap)}</div><audio controls preload="none" src="{_e(name)}"></audio> '
            f'<a href="{_e(name)}">{_e(name)}</a></div>'
        )
    return "\n".join(parts)


SECTIONS = (
    ("plan", "Plan"),
    ("chain", "Chain"),
    ("response", "Response"),
    ("spectrum", "Test tone"),
    ("sweeps", "Sweeps"),
    ("hostile", "Hostile conditions"),
    ("budget", "CPU and RAM"),
    ("certificate", "Fixed-point certificate"),
    ("listen", "Listening"),
)

CSS = """
body { font-family: "DejaVu Sans", Arial, sans-serif; margin: 0 auto; max-width: 1150px; padding: 12px 20px;
       color: #1d1d1d; background: #ffffff; font-size: 14px; }
h1 { font-size: 24px; margin: 8px 0 2px; } h2 { font-size: 18px; border-bottom: 2px solid #1f4e9c;
       padding-bottom: 2px; margin-top: 28px; } h3 { font-size: 15px; margin: 16px 0 4px; }
.sub, .small { color: #555; } .small { font-size: 12px; }
.verdict { background: #f3f5f9; border-left: 4px solid #1f4e9c; padding: 4px 12px; margin: 10px 0; }
.verdict p { margin: 5px 0; }
nav a { color: #1f4e9c; }
table { border-collapse: collapse; margin: 6px 0; font-size: 12.5px; }
th, td { border: 1px solid #c9ced6; padding: 3px 6px; text-align: left; vertical-align: top; }
th { background: #e8ecf3; } tr.chosen td { background: #e3f1e6; font-weight: bold; }
tr.failed td { background: #fbe5e3; }
.ok { color: #1b7f3b; font-weight: bold; } .bad { color: #b3261e; font-weight: bold; }
.chain { display: flex; flex-wrap: wrap; align-items: center; gap: 4px; margin: 8px 0; }
.box { border: 2px solid #1f4e9c; border-radius: 6px; padding: 5px 8px; background: #f7f9fd; font-size: 12px;
       min-width: 120px; } .bt { font-weight: bold; color: #1f4e9c; margin-bottom: 2px; }
.arrow { display: flex; flex-direction: column; align-items: center; font-size: 11px; color: #444; max-width: 110px;
         text-align: center; } .arrow b { font-size: 22px; color: #1f4e9c; line-height: 1; }
.cards { display: flex; flex-wrap: wrap; gap: 8px; } .card { border: 1px solid #c9ced6; padding: 2px; }
img { max-width: 100%; }
.bar { position: relative; width: 420px; height: 16px; background: #e8ecf3; border: 1px solid #c9ced6; }
.fill { height: 100%; background: #1b7f3b; } .fill.over { background: #b3261e; }
.mark { position: absolute; top: -4px; width: 2px; height: 24px; background: #1d1d1d; }
.clip { margin: 8px 0; } audio { vertical-align: middle; }
footer { margin-top: 30px; font-size: 12px; color: #555; }
"""

# On load: every inline image must have decoded; any error is written into the page.
CHECK_JS = """
(function () {
  var errors = [];
  window.addEventListener('error', function (ev) {
    var t = ev.target && ev.target.tagName ? ev.target.tagName + ' failed to load' : String(ev.message);
    errors.push(t);
  }, true);
  window.addEventListener('load', function () {
    var imgs = document.images;
    for (var i = 0; i < imgs.length; i++) {
      if (!(imgs[i].complete && imgs[i].naturalWidth > 0)) { errors.push('image not shown: ' + imgs[i].alt); }
    }
    var el = document.getElementById('page-check');
    el.textContent = errors.length ? 'page errors: ' + errors.join('; ')
                                   : '%s (' + imgs.length + ' images)';
  });
})();
""".replace("%s", PAGE_OK)  # not str.format: the JavaScript braces would all need doubling


def render(ctx: ReportContext) -> str:
    """The whole report page as HTML text."""
    bodies = {
        "plan": _plan_section,
        "chain": _chain_section,
        "response": _response_section,
        "spectrum": _spectrum_section,
        "sweeps": _sweeps_section,
        "hostile": _hostile_section,
        "budget": _budget_section,
        "certificate": _certificate_section,
        "listen": _listening_section,
    }
    sections = [_section(a, t, bodies[a](ctx)) for a, t in SECTIONS]
    if ctx.data is not None:  # a data design: its section after the test tone's
        from . import datalink

        at = [a for a, _ in SECTIONS].index("spectrum") + 1
        sections.insert(at, _section("data", "Data link", datalink.section(ctx.design, ctx.data)))
    return "\n".join(
        [
            "<!DOCTYPE html>",
            '<html lang="en">',
            "<head>",
            '<meta charset="utf-8">',
            f"<title>edgetally design report: {_e(ctx.design.name)}</title>",
            f"<style>{CSS}</style>",
            f"<script>{CHECK_JS}</script>",
            "</head>",
            "<body>",
            _header(ctx),
            *sections,
            f"<footer>Made by edgetally {_e(ctx.design.tool_version)} from spec hash {_e(ctx.design.spec_hash)}. "
            f'<span id="page-check">page check did not run</span></footer>',
            "</body>",
            "</html>",
            "",
        ]
    )


def report_name(design: Design) -> str:
    return f"{design.name}_report.html"


def file_names(design: Design) -> tuple[str, ...]:
    """The names report_files gives its files, known before anything is computed."""
    return (report_name(design), *listen.clip_names(design))


def report_files(
    spec: Spec,
    plan: Plan,
    design: Design,
    result: VerifyResult,
    sweeps: tuple = (),
    hostile: tuple = (),
    seconds: float = 2.0,
    seed: int = DEFAULT_SEED,
    host=None,
    data=None,
) -> dict[str, bytes]:
    """Every file of the report: the page and its WAV files, {file name: bytes}. Runs the three
    listening signals through the emitted C (``seconds`` each); writes nothing."""
    made = listen.clips(design, seconds=seconds, seed=seed, host=host)
    ctx = ReportContext(
        spec=spec,
        plan=plan,
        design=design,
        verify=result,
        tone_out=made[0].samples,
        sweeps=tuple(sweeps),
        hostile=tuple(hostile),
        wav_names=tuple(c.name for c in made),
        wav_captions=tuple(c.caption for c in made),
        data=data,
    )
    files = {report_name(design): render(ctx).encode("utf-8")}
    files.update(listen.wav_files(design, made))
    return files
