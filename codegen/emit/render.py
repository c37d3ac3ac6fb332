"""Design -> C source text through the jinja2 templates in edgetally.c_templates.

The templates only print what the Design holds (StrictUndefined: a missing value is an error, never
an empty string). The fixed-point helpers come from ``edgetally.fixedpoint``. No timestamps: the
same Design always gives byte-identical files. ``api(design)`` lists the public functions once,
for the header and for the host build's cffi declarations alike.
"""

from __future__ import annotations

import functools
import importlib.resources
from dataclasses import dataclass

import jinja2

from ..fixedpoint import c_definitions
from ..ir import Design, Topology
from . import deviations


@dataclass(frozen=True)
class Function:
    proto: str  # C prototype without the trailing semicolon
    doc: str  # one comment line for the header


def input_type(design: Design) -> str:
    """The C type of one input (``Design.input_ctype``)."""
    return design.input_ctype


def api(design: Design) -> list[Function]:
    """The public functions of the emitted C for this design, in header order."""
    p = design.name
    st, inp = f"{p}_state_t *s", f"{p}_input_t"
    fns = [
        Function(f"void {p}_init({st})", "Reset the state; the grid starts with the first inputs after this."),
        Function(
            f"size_t {p}_process({st}, const {inp} *in, size_t n, {p}_sample_t *out, size_t cap, size_t *produced)",
            "Process n inputs (oldest first); at most cap samples to out, their number to *produced; "
            "returns the inputs consumed (fewer than n when out filled up: call again with the rest).",
        ),
        Function(
            f"size_t {p}_service({st}, {p}_sample_t *out, size_t cap)",
            "Main loop: process the inputs the ISRs queued; returns the samples written (<= cap).",
        ),
    ]
    topo = design.topology
    if design.stamps:
        fns.append(
            Function(
                f"size_t {p}_advance({st}, {inp} now, {p}_sample_t *out, size_t cap)",
                "Service loop, once per output period (at least every half timer range): the "
                "free-running timer's value, read before the last process()/service() call; "
                "writes muted samples for the grid instants that passed with no edges, so the "
                "output rate holds through a signal loss. Returns the samples written (<= cap).",
            )
        )
    if topo is Topology.CAPTURE:
        fns.append(
            Function(
                f"void {p}_capture_isr({st}, {inp} stamp)",
                "Capture interrupt: queue the captured timer value (drops it and counts an overrun if full).",
            )
        )
    elif topo is Topology.EDGE_STAMP:
        fns.append(
            Function(
                f"void {p}_edge_isr({st}, {inp} timer_now)",
                "Edge interrupt: queue the free-running timer's value read at entry.",
            )
        )
    elif topo is Topology.EDGE_COUNT:
        fns.append(Function(f"void {p}_edge_isr({st})", "Edge interrupt: count one IF edge."))
        fns.append(Function(f"void {p}_tick_isr({st})", "Grid timer interrupt: queue the edge count."))
    else:
        fns.append(
            Function(
                f"void {p}_tick_isr({st}, {inp} count)", "Grid timer interrupt: queue the IF-clocked counter's value."
            )
        )
    fns += [
        Function(f"bool {p}_carrier_present(const {st})", "True while edges arrive at a plausible rate."),
        Function(
            f"bool {p}_squelch_open(const {st})",
            "True while the noise squelch passes the audio (closed: the samples are mid-scale).",
        ),
        Function(
            f"int32_t {p}_offset(const {st})",
            "The tuning offset: DC of the frequency estimate, in the units the header gives.",
        ),
        Function(f"uint32_t {p}_saturation_count(const {st})", "Internal data nodes that saturated so far."),
        Function(f"uint32_t {p}_clip_count(const {st})", "Output samples clipped to the output range so far."),
        Function(
            f"uint32_t {p}_gap_count(const {st})",
            "Grid instants with no carrier so far (gaps, lost inputs and the resync after each: muted).",
        ),
        Function(
            f"uint32_t {p}_clamp_count(const {st})",
            "Grid steps outside the range this carrier can make so far (noise, spurious edges: muted).",
        ),
        Function(
            f"uint32_t {p}_overrun_count(const {st})",
            "Losses so far: inputs dropped because the queue was full, and calls of inputs_lost.",
        ),
        Function(
            f"void {p}_inputs_lost({st})",
            "Inputs were lost before the next one (e.g. a DMA overrun): the interval across the loss is "
            "taken as a gap. Call from the context that calls process().",
        ),
    ]
    return fns + data_api(design)


def data_api(design: Design) -> list[Function]:
    """The data path's public functions (none for an audio-only design)."""
    dl, p = design.data, design.name
    if dl is None:
        return []
    st = f"{p}_state_t *s"
    fns = [
        Function(
            f"size_t {p}_bits_read({st}, uint8_t *dst, size_t cap)",
            "The decided bits not yet read, oldest first, one per byte (0 or 1), at most cap; returns their number.",
        ),
        Function(f"uint32_t {p}_bit_count(const {st})", "Bits decided so far."),
        Function(f"uint32_t {p}_bit_overrun_count(const {st})", "Bits lost so far because bits_read came too late."),
        Function(f"bool {p}_data_locked(const {st})", "True while the bit clock is locked (see the data section)."),
    ]
    if dl.sync_bits:
        fns += [
            Function(f"bool {p}_frame_ready(const {st})", "True when a complete frame waits for frame_read."),
            Function(f"uint32_t {p}_frame_count(const {st})", "Frames completed so far."),
            Function(f"uint32_t {p}_sync_count(const {st})", "Sync-word matches so far."),
            Function(
                f"size_t {p}_frame_read({st}, uint8_t *dst, size_t cap)",
                "Copy the waiting frame (at most cap bytes) and clear frame_ready; returns the bytes copied (0: none).",
            ),
        ]
    return fns


def isr_names(design: Design) -> list[str]:
    """The functions of api() that interrupts call, in header order (edge before tick)."""
    return [f.proto.split("(")[0].split()[-1] for f in api(design) if "_isr(" in f.proto]


def internal_functions(design: Design) -> dict[str, list[str]]:
    """The emitted C's internal (static) functions by the part of the chain they do, for tools that
    attribute executed code to a role (edgetally.target.cycles): "output" (the post-CIC chain and
    its clipping, once per output sample), "grid" (the CIC, once per grid instant) and "input" (the
    per-input front end and the queue). One definition, checked against the emitted C by a test."""
    p = design.name
    stamp_only = ("phase", "gap") if design.stamps else ()
    data: tuple[str, ...] = ()
    if design.data is not None:
        data = ("data_step", "data_bit", "data_out")
        data += ("data_frame",) if design.data.sync_bits else ()
        data += ("data_chip",) if design.data.chips == 2 else ()
    return {
        "output": [f"{p}_post", f"{p}_clip_data", *(f"{p}_{n}" for n in data)],
        "grid": [f"{p}_grid"],
        "input": [f"{p}_{n}" for n in ("process", "service", "input", *stamp_only, "full", "queue")],
    }


def _operations(design: Design) -> list[str]:
    """The fixed-point operations this design's C calls."""
    ops = ["wrap_s32", "squelch_level32" if design.squelch.level_bits == 32 else "squelch_level"]
    if design.scale.word == 32:
        ops += ["rshr32", "sat32"]
    if design.scale.product == "s32":  # rounded in 32 bits whatever the tracker's word
        ops.append("rshr32")
    if design.scale.word == 64 or design.scale.product == "s64":
        ops += ["rshr", "sat"]
    if design.data is not None:  # the data path's input word (datalink.c.j2)
        ops += ["sat"] + (["rshr"] if design.data.in_shift > 0 else [])
    if design.scale.product == "split":
        ops.append("split_scale")
    elif design.scale.product == "split_low":
        ops.append("split_scale_low")
    if design.filters.acc_bits == 48:
        ops += ["split_mac", "split_round"]
    if design.data is not None:
        ops += ["rshr32", "sat32"] + (["bit_errors"] if design.data.sync_bits else [])
    if design.filters.shaped:
        ops += ["clip32"] + [
            n
            for n, used in (("fir_section", True), ("shaped_section", False))
            if any(s.fir == used for s in design.filters.sections)
        ]
    if design.stamps:
        ops.append("reciprocal" if design.recip is not None else "ratio_floor")
        if design.cubic:
            ops += ["rshr32", "sat32", "cubic_fraction"]
    return ops


@dataclass(frozen=True)
class Port:
    """What the wiring skeleton <name>_port.c prints: its handlers, the hardware-access functions
    the user writes, and its buffer lengths (made here, so the template only prints them)."""

    api: tuple[Function, ...]  # the port's own functions (vector table, main loop)
    handlers: tuple  # (name, doc) of the interrupt handlers, for the comment
    hw: tuple[Function, ...]  # the hardware-access interface
    ring: int  # output ring length, a power of two
    chunk: int  # samples taken per service call (a stack buffer)
    half: int  # inputs per DMA half-buffer (DMA designs): the queue's length
    dma: bool  # the inputs come by DMA
    clock: bool = False  # the main loop drives <name>_advance with the timer (stamp ISR designs)
    data: bool = False  # a data design: the main loop hands bits (and frames) to the application
    frames: bool = False  # ... and frames (a sync word is set)


PORT_CHUNK = 16  # samples per service call: 32 or 64 bytes of stack (common practice, no source)


def port(design: Design) -> Port:
    """The wiring skeleton's parts for this design. The output ring holds at least four queues'
    worth of output samples at the IF centre's input rate, and two chunks."""
    p, fr, b = design.name, design.front, design.budget
    inp = f"{p}_input_t"
    rate = design.if_hz / fr.prescale if design.stamps else design.rates.grid_hz
    per_queue = -(-design.queue_len * design.rates.out_hz // int(rate))
    ring = 1 << (max(2 * PORT_CHUNK, 4 * per_queue) - 1).bit_length()
    topo = design.topology
    dma = b.dma and topo in (Topology.CAPTURE, Topology.COUNTER)  # as the header's wiring comment reads it
    handlers = []
    hw = [
        Function(
            f"void {p}_hw_output_start(uint32_t rate_hz)",
            "Start the output timer at rate_hz, calling the output interrupt each period (DAC or PWM).",
        ),
        Function(
            f"void {p}_hw_output_write({p}_sample_t v)",
            f"Write one sample (format {design.output.format}) to the DAC or the PWM compare register.",
        ),
        Function(f"void {p}_hw_output_stalled(void)", "The output ring is full: the output timer is not running."),
        Function(f"void {p}_hw_mute(bool mute)", "Mute (true) or unmute the audio stage: the carrier is absent."),
        Function(
            f"void {p}_hw_inputs_lost(uint32_t total)", "Inputs were lost (queue full or DMA late): total so far."
        ),
    ]
    if dma:
        what = "capture" if topo is Topology.CAPTURE else "counter"
        if topo is Topology.CAPTURE:
            hw.append(
                Function(
                    f"void {p}_hw_capture_dma_start({inp} *buf, uint32_t n, uint32_t prescale)",
                    f"Start the {fr.timer_bits}-bit timer at {design.rates.timer_hz} Hz, input capture on "
                    "every prescale-th IF edge, circular DMA of the captured values into buf[0..n-1] "
                    "with half and full transfer interrupts.",
                )
            )
        else:
            hw.append(
                Function(
                    f"void {p}_hw_counter_dma_start({inp} *buf, uint32_t n, uint32_t grid_ticks)",
                    f"Start the {fr.counter_bits}-bit counter clocked by the IF and a grid timer of "
                    "grid_ticks timer ticks whose event copies the counter by circular DMA into "
                    "buf[0..n-1], with half and full transfer interrupts.",
                )
            )
        handlers += [
            (f"{p}_port_dma_half_irq", f"{what} DMA half transfer"),
            (f"{p}_port_dma_full_irq", f"{what} DMA transfer complete"),
        ]
    elif topo is Topology.CAPTURE:
        hw += [
            Function(
                f"void {p}_hw_capture_start(uint32_t prescale)",
                f"Start the {fr.timer_bits}-bit timer at {design.rates.timer_hz} Hz with input capture on "
                "every prescale-th IF edge and its interrupt.",
            ),
            Function(f"{inp} {p}_hw_capture_value(void)", "The captured timer value (and clear the capture flag)."),
            Function(f"{inp} {p}_hw_timer_now(void)", f"The free-running {fr.timer_bits}-bit capture timer, read now."),
        ]
        handlers.append((f"{p}_port_capture_irq", f"timer capture, one per {fr.prescale} IF edge(s)"))
    elif topo in (Topology.EDGE_STAMP, Topology.EDGE_COUNT):
        hw.append(
            Function(f"void {p}_hw_edge_irq_start(void)", "Enable the comparator or pin interrupt on the IF edge.")
        )
        if topo is Topology.EDGE_STAMP:
            hw.append(
                Function(
                    f"{inp} {p}_hw_timer_now(void)",
                    f"The free-running {fr.timer_bits}-bit timer at {design.rates.timer_hz} Hz, read now.",
                )
            )
            handlers.append((f"{p}_port_edge_irq", "every IF edge"))
        else:
            hw.append(
                Function(
                    f"void {p}_hw_grid_timer_start(uint32_t grid_ticks)",
                    "Start the grid timer: an interrupt every grid_ticks timer ticks.",
                )
            )
            handlers += [
                (f"{p}_port_edge_irq", "every IF edge"),
                (f"{p}_port_tick_irq", f"grid timer, {design.rates.grid_hz} Hz"),
            ]
    else:
        hw += [
            Function(
                f"void {p}_hw_grid_timer_start(uint32_t grid_ticks)",
                f"Start the {fr.counter_bits}-bit counter clocked by the IF and the grid timer: an interrupt "
                "every grid_ticks timer ticks.",
            ),
            Function(f"{inp} {p}_hw_counter_value(void)", "The IF-clocked counter's value, read now."),
        ]
        handlers.append((f"{p}_port_tick_irq", f"grid timer, {design.rates.grid_hz} Hz"))
    handlers.append((f"{p}_port_output_irq", f"output timer, {design.rates.out_hz} Hz"))
    dl = design.data
    if dl is not None:
        hw.append(
            Function(
                f"void {p}_app_bits(const uint8_t *bits, size_t n)",
                "The application's: n decided bits (each 0 or 1), oldest first, from the main loop.",
            )
        )
        if dl.sync_bits:
            hw.append(
                Function(
                    f"void {p}_app_frame(const uint8_t *frame, size_t n)",
                    f"The application's: a frame of n = {dl.frame_bytes} bytes after the sync word, from the main loop.",
                )
            )
    api = [
        Function(f"void {p}_port_start(void)", ""),
        Function(f"void {p}_port_poll(void)", ""),
        Function(f"uint32_t {p}_port_pending(void)", ""),
        Function(f"int32_t {p}_port_offset(void)", ""),
    ]
    api += [Function(f"void {n}(void)", d) for n, d in handlers]
    return Port(
        api=tuple(api),
        handlers=tuple(dict(name=n, doc=d) for n, d in handlers),
        hw=tuple(hw),
        ring=ring,
        chunk=PORT_CHUNK,
        half=design.queue_len,
        dma=dma,
        clock=design.stamps and not dma,
        data=dl is not None,
        frames=dl is not None and dl.sync_bits > 0,
    )


@functools.lru_cache(maxsize=1)
def _env() -> jinja2.Environment:
    """The one template environment (made once: compiling the templates costs more than rendering)."""
    env = jinja2.Environment(
        loader=jinja2.FunctionLoader(
            lambda name: importlib.resources.files("edgetally.c_templates").joinpath(name).read_text("utf-8")
        ),
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
        autoescape=False,
    )
    env.filters["hz"] = lambda v: f"{v:,.6g} Hz".replace(",", " ")
    env.filters["mhz"] = lambda v: f"{v / 1e6:g} MHz"
    env.filters["pct"] = lambda v: f"{100 * v:.1f} %"
    return env


def banner(design: Design) -> str:
    return (
        f"/* Generated by edgetally {design.tool_version} from a spec with hash {design.spec_hash}.\n"
        f" * Design '{design.name}', scheme '{design.scheme}'. Do not edit: change the spec and emit again. */"
    )


@dataclass(frozen=True)
class Vectors:
    """Recorded inputs and the integer model's outputs for the emitted unit test."""

    inputs: tuple[int, ...]
    outputs: tuple[int, ...]
    seconds: float
    seed: int
    block: int = 256
    bits: tuple[int, ...] = ()  # data designs: every bit the model decides
    frames: tuple[bytes, ...] = ()  # data designs with a sync word: every frame, in order


def test_dir(name: str) -> str:
    """The subfolder of the desktop unit test, beside the C: its own folder, so that its Makefile
    and CMakeLists.txt never meet the user's build files."""
    return f"{name}_test"


def file_names(name: str, test: bool = True, design_json: bool = True) -> tuple[str, ...]:
    """Every path (relative to the output folder) emit writes for a design called ``name``: the
    C (``emit``), the Design as JSON, and with ``test`` the unit test's folder (``unit_test``)."""
    names = [f"{name}.h", f"{name}.c", f"{name}_port.c"] + ([f"{name}_design.json"] if design_json else [])
    if test:
        t = test_dir(name)
        names += [f"{t}/{name}_test.c", f"{t}/{name}_vectors.h", f"{t}/Makefile", f"{t}/CMakeLists.txt"]
    return tuple(names)


def unit_test(design: Design, vectors: Vectors) -> dict[str, str]:
    """The desktop unit test around the emitted C, in its own subfolder (``test_dir``):
    <name>_test.c, <name>_vectors.h, a Makefile (``make test``) and a CMakeLists.txt (``ctest``),
    which build the C of the folder above."""
    env = _env()
    p = design.name
    ctx = dict(d=design, p=p, P=p.upper(), banner=banner(design), vectors=vectors)
    t = test_dir(p)
    return {
        f"{t}/{p}_test.c": env.get_template("unit_test.c.j2").render(ctx),
        f"{t}/{p}_vectors.h": env.get_template("vectors.h.j2").render(ctx),
        f"{t}/Makefile": env.get_template("Makefile.j2").render(ctx),
        f"{t}/CMakeLists.txt": env.get_template("CMakeLists.txt.j2").render(ctx),
    }


def emit(design: Design) -> dict[str, str]:
    """The C files of ``design``: {"<name>.h": text, "<name>.c": text, "<name>_port.c": text} (the
    last a wiring skeleton over a hardware-access interface the user writes)."""
    env = _env()
    p = design.name
    inp = input_type(design)
    ctx = dict(
        d=design,
        fr=design.front,
        p=p,
        P=p.upper(),
        banner=banner(design),
        api=api(design),
        nsec=len(design.filters.sections),
        # the shaped arithmetic keeps 32-bit words (one load each, any data width up to its limit)
        data_type="int16_t" if design.filters.data_bits == 16 and not design.filters.shaped else "int32_t",
        coef_type="int16_t" if design.filters.coef_width == 16 and not design.filters.shaped else "int32_t",
        coef_macro="INT16_C" if design.filters.coef_width == 16 and not design.filters.shaped else "INT32_C",
        offset_hz_per_lsb=f"{design.offset_hz_per_unit:.6g}",
        # the words of the scale, tracker and output stage, and of the squelch level (Design's choice)
        base_type="int32_t" if design.scale.word == 32 else "int64_t",
        base_c="INT32_C" if design.scale.word == 32 else "INT64_C",
        base_rshr=f"{p}_rshr32" if design.scale.word == 32 else f"{p}_rshr",
        base_sat=f"{p}_sat32" if design.scale.word == 32 else f"{p}_sat",
        level_c="UINT32_C" if design.squelch.level_bits == 32 else "UINT64_C",
        # template flags: the templates branch on these and print the Design, never decide
        stamp=design.stamps,
        cubic=design.cubic,
        capture=design.topology is Topology.CAPTURE,
        edge_stamp=design.topology is Topology.EDGE_STAMP,
        edge_count=design.topology is Topology.EDGE_COUNT,
        counter=design.topology is Topology.COUNTER,
        data=design.data is not None,
        dl=design.data,
        recip=design.recip,
        input_type=inp,
        input_mask="UINT32_C(0xFFFF)" if inp == "uint16_t" else "UINT32_MAX",
        fixedpoint=c_definitions(
            p,
            _operations(design),
            design.recip,
            design.front.delta_limit if design.cubic else 0,
            design.front.phase_shift if design.stamps else 0,
        ),
        misra=deviations.header_text(p),
    )
    return {
        f"{p}.h": env.get_template("demod.h.j2").render(ctx),
        f"{p}.c": env.get_template("demod.c.j2").render(ctx),
        f"{p}_port.c": env.get_template("port.c.j2").render(ctx, port=port(design)),
    }
