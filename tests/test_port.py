"""The wiring skeleton <name>_port.c: it compiles warning-free under the strict flags with a stub of
its hardware-access interface, for every example and every forced scheme; and, driven through that
stub as the hardware would drive it (each input by its interrupt, or by DMA halves; the main loop's
poll; the output timer), the samples it writes to the output are the integer model's, every one."""

import shutil
import subprocess

import numpy as np
import pytest

from edgetally.check import model
from edgetally.check.hostbuild import STRICT_FLAGS
from edgetally.emit import emit
from edgetally.emit.render import port
from edgetally.stimulus import fsk
from edgetally.stimulus.inputs import make_inputs

from conftest import ALL_DESIGNS

COMPILERS = [c for c in ("gcc", "clang") if shutil.which(c)]

# The stub: every hardware-access function, the input registers read from the feed, the output
# register written to a file; a driver that plays the hardware's part.
STUB = r"""
#include <stdio.h>
#include <stdlib.h>
#include "{p}.h"

uint32_t {p}_port_pending(void);
void {p}_port_start(void);
void {p}_port_poll(void);
void {p}_port_output_irq(void);
{handlers}

static {p}_input_t cur;
static {p}_input_t *dma_buf;
static uint32_t dma_n;
static FILE *fo;
static unsigned long mutes, losses, stalls;

void {p}_hw_output_start(uint32_t rate_hz) {{ (void)rate_hz; }}
void {p}_hw_output_write({p}_sample_t v) {{ fprintf(fo, "%ld\n", (long)v); }}
void {p}_hw_output_stalled(void) {{ stalls++; }}
void {p}_hw_mute(bool mute) {{ mutes += mute ? 1u : 0u; }}
void {p}_hw_inputs_lost(uint32_t total) {{ losses = total; }}
void {p}_hw_capture_dma_start({p}_input_t *buf, uint32_t n, uint32_t prescale) {{ dma_buf = buf; dma_n = n; (void)prescale; }}
void {p}_hw_counter_dma_start({p}_input_t *buf, uint32_t n, uint32_t grid_ticks) {{ dma_buf = buf; dma_n = n; (void)grid_ticks; }}
void {p}_hw_capture_start(uint32_t prescale) {{ (void)prescale; }}
{p}_input_t {p}_hw_capture_value(void) {{ return cur; }}
void {p}_hw_edge_irq_start(void) {{ }}
{p}_input_t {p}_hw_timer_now(void) {{ return cur; }}
void {p}_hw_grid_timer_start(uint32_t grid_ticks) {{ (void)grid_ticks; }}
{p}_input_t {p}_hw_counter_value(void) {{ return cur; }}
void {p}_app_bits(const uint8_t *bits, size_t n);
void {p}_app_frame(const uint8_t *frame, size_t n);
void {p}_app_bits(const uint8_t *bits, size_t n) {{ size_t i; for (i = 0u; i < n; i++) {{ fprintf(fo, "b%u\n", (unsigned)bits[i]); }} }}
void {p}_app_frame(const uint8_t *frame, size_t n)
{{
    size_t i;
    fputs("f", fo);
    for (i = 0u; i < n; i++) {{ fprintf(fo, "%02x", (unsigned)frame[i]); }}
    fputs("\n", fo);
}}

static void drain(void) {{ while ({p}_port_pending() > 0u) {{ {p}_port_output_irq(); }} }}

int main(int argc, char **argv)
{{
    FILE *fi = fopen(argv[1], "rb");
    unsigned long k = 0u, every = strtoul(argv[3], NULL, 10), v;
    uint32_t half = 0u;
    (void)argc;
    fo = fopen(argv[2], "w");
    {p}_port_start();
    while (fscanf(fi, "%lu", &v) == 1) {{
        cur = ({p}_input_t)v;
{feed}
        k++;
    }}
    {p}_port_poll();
    drain();
    fprintf(fo, "end %lu %lu %lu\n", stalls, losses, mutes);
    fclose(fi);
    fclose(fo);
    (void)dma_n; (void)half; (void)every;
    return 0;
}}
"""

FEED = {
    "dma": """        dma_buf[half * (dma_n / 2u) + (uint32_t)(k % (dma_n / 2u))] = cur;
        if (k % (dma_n / 2u) == dma_n / 2u - 1u) {{
            if (half == 0u) {{ {p}_port_dma_half_irq(); }} else {{ {p}_port_dma_full_irq(); }}
            half ^= 1u;
            {p}_port_poll();
            drain();
        }}""",
    "isr": """        {isr}();
        if ((k + 1u) % every == 0u) {{ {p}_port_poll(); drain(); }}""",
}


def _build(d, folder, cc):
    files = emit(d)
    for name, text in files.items():
        (folder / name).write_text(text)
    pt = port(d)
    kind = "dma" if pt.dma else "isr"
    isr = next((h["name"] for h in pt.handlers if not h["name"].endswith("output_irq")), "")
    handlers = "\n".join(f"void {h['name']}(void);" for h in pt.handlers)
    feed = FEED[kind].format(p=d.name, isr=isr)
    (folder / "stub.c").write_text(STUB.format(p=d.name, handlers=handlers, feed=feed))
    port_c = folder / f"{d.name}_port.c"
    res = subprocess.run([cc, *STRICT_FLAGS, "-O2", "-c", str(port_c), "-o", str(folder / "port.o")],
                         capture_output=True, text=True)
    exe = folder / "drv"
    link = subprocess.run([cc, *STRICT_FLAGS, "-O2", "-o", str(exe), str(folder / "stub.c"), str(port_c),
                           str(folder / f"{d.name}.c")], capture_output=True, text=True)
    return res, link, exe, kind


@pytest.mark.parametrize("key", sorted(ALL_DESIGNS))
@pytest.mark.parametrize("cc", COMPILERS)
def test_port_compiles_strict(key, cc, tmp_path):
    """Warning-free under -std=c99 -Wall -Wextra -Wpedantic -Wconversion -Wsign-conversion -Werror."""
    d = ALL_DESIGNS[key]
    res, link, _, _ = _build(d, tmp_path, cc)
    assert res.returncode == 0 and res.stderr == "", res.stderr
    assert link.returncode == 0 and link.stderr == "", link.stderr


@pytest.mark.parametrize("key", sorted(ALL_DESIGNS))
def test_port_wiring_gives_the_model_output(key, tmp_path):
    """Driven as the hardware would (inputs by interrupt with a poll every half queue, or DMA halves
    with a poll after each), the output register sees exactly the model's samples, in order."""
    d = ALL_DESIGNS[key]
    if d.scheme == "interrupt" and d.front.kind == "count":
        pytest.skip("the stub's driver feeds one register value per input")  # no example has this variant
    _, link, exe, kind = _build(d, tmp_path, COMPILERS[0])
    assert link.returncode == 0, link.stderr
    # a data design plays noisy frames (the data test) so that bits and frames come out too
    inputs = fsk.data_test(d, 0.05, 7)[0].inputs if d.data is not None else make_inputs(d, 0.05, seed=7)
    every = max(1, d.queue_len // 2)
    if kind == "dma":
        inputs = inputs[:inputs.size - inputs.size % d.queue_len]      # DMA delivers whole halves only
    (tmp_path / "in.txt").write_text("\n".join(str(int(v)) for v in inputs) + "\n")
    subprocess.run([str(exe), str(tmp_path / "in.txt"), str(tmp_path / "out.txt"), str(every)], check=True,
                   timeout=120)
    lines = (tmp_path / "out.txt").read_text().splitlines()
    stalls, losses, _ = (int(v) for v in lines[-1].split()[1:])
    got = np.array([int(v) for v in lines[:-1] if v[0] not in "bf"], dtype=np.int64)
    m = model.run(d, inputs)
    want = m.out.astype(np.int64)
    assert (stalls, losses) == (0, 0)
    assert got.size == want.size > 100
    assert np.array_equal(got, want)
    bits = [int(v[1:]) for v in lines if v[0] == "b"]
    frames = [bytes.fromhex(v[1:]) for v in lines if v[0] == "f"]
    if d.data is None:
        assert not bits and not frames
    else:  # every bit and every frame the model decides, in order, through the application hooks
        assert len(bits) > 100 and bits == m.data.bits.tolist()
        assert frames == list(m.data.frames) and (len(frames) >= 2 or not d.data.sync_bits)


CROSS = [c for c in (["avr-gcc", "-mmcu=atmega328p"], ["arm-none-eabi-gcc", "-mcpu=cortex-m0plus", "-mthumb"])
         if shutil.which(c[0])]


@pytest.mark.parametrize("key", sorted(k for k in ALL_DESIGNS if not k.endswith(":auto")))
@pytest.mark.parametrize("cross", CROSS, ids=lambda c: c[0])
def test_port_compiles_for_the_targets(key, cross, tmp_path):
    """Also warning-free where int and size_t are 16 bits (AVR) and for a Thumb core."""
    d = ALL_DESIGNS[key]
    for name, text in emit(d).items():
        (tmp_path / name).write_text(text)
    res = subprocess.run([cross[0], *STRICT_FLAGS, "-Os", *cross[1:], "-c", str(tmp_path / f"{d.name}_port.c"),
                          "-o", str(tmp_path / "port.o")], capture_output=True, text=True)
    assert res.returncode == 0 and res.stderr == "", res.stderr
