/* Baseline for the target check and bench_target.py: the same demodulator chain written by hand in
 * plain floating point, the way a user might write it without a fixed-point design: linear
 * interpolation of the phase between stamps (or the count difference), a CIC as a cascade of moving
 * sums, a one-pole DC tracker, direct-form I biquads, rounding and clipping to int16. `real` is
 * float (what a user writes for a small core; -Wdouble-promotion keeps every operation single
 * precision) or double (an extra column), set by float_params.h. Compiled with soft float (libgcc)
 * or for the core's FPU, and run in the same emulator as the integer C. Not bit-exact with
 * anything; only its cost is of interest. Times are kept relative to the last stamp so that single
 * precision stays exact over a long run. */
#include <stdint.h>
#include <stddef.h>
#include "float_params.h"

typedef FLT_REAL real;
#define R(x) ((real)(x))

#define HARNESS_IN_LEN  FLT_IN_LEN
#define HARNESS_OUT_LEN FLT_OUT_LEN

FLT_INPUT_T harness_in[HARNESS_IN_LEN];
int16_t harness_out[HARNESS_OUT_LEN];
uint32_t harness_consumed;
const uint32_t harness_state_size = 0u;

void harness_init(void);
uint32_t harness_process(uint32_t first, uint32_t n);

static real ring[FLT_CIC_ORDER][FLT_CIC_RATIO];
static real msum[FLT_CIC_ORDER];
static unsigned ring_pos;
static unsigned dec;
static real dc;
static real zx[FLT_NSEC][2], zy[FLT_NSEC][2];
static int started;
static uint32_t prev;          /* last raw input */
static real g;                 /* next grid instant, in ticks after the last stamp */
static real base;              /* phase of the last stamp minus that of the last grid instant */
static size_t produced;

void harness_init(void)
{
    unsigned i, j;
    for (i = 0u; i < FLT_CIC_ORDER; i++) {
        msum[i] = R(0.0);
        for (j = 0u; j < FLT_CIC_RATIO; j++) {
            ring[i][j] = R(0.0);
        }
    }
    for (i = 0u; i < FLT_NSEC; i++) {
        zx[i][0] = zx[i][1] = zy[i][0] = zy[i][1] = R(0.0);
    }
    ring_pos = 0u;
    dec = 0u;
    dc = R(0.0);
    started = 0;
    prev = 0u;
    g = base = R(0.0);
}

static void post(real y)
{
    unsigned k;
    real v, o;
    dc += (y - dc) * FLT_DC_ALPHA;
    v = (y - dc) * FLT_GAIN;
    for (k = 0u; k < FLT_NSEC; k++) {
        const real *c = flt_sos[k];
        real w = c[0] * v + c[1] * zx[k][0] + c[2] * zx[k][1] - c[4] * zy[k][0] - c[5] * zy[k][1];
        zx[k][1] = zx[k][0];
        zx[k][0] = v;
        zy[k][1] = zy[k][0];
        zy[k][0] = w;
        v = w;
    }
    o = v * R(32767.0);
    if (o > R(32767.0)) {
        o = R(32767.0);
    } else if (o < R(-32768.0)) {
        o = R(-32768.0);
    }
    harness_out[produced++] = (int16_t)(o < R(0.0) ? o - R(0.5) : o + R(0.5));
}

static void grid(real x)
{
    unsigned k;
    for (k = 0u; k < FLT_CIC_ORDER; k++) {     /* cascade of moving sums over CIC_RATIO samples */
        msum[k] += x - ring[k][ring_pos];
        ring[k][ring_pos] = x;
        x = msum[k];
    }
    ring_pos = (ring_pos + 1u) % FLT_CIC_RATIO;
    if (++dec == FLT_CIC_RATIO) {
        dec = 0u;
        post(x);
    }
}

uint32_t harness_process(uint32_t first, uint32_t n)
{
    uint32_t i;
    produced = 0u;
    for (i = 0u; i < n && produced + 8u < HARNESS_OUT_LEN; i++) {
        uint32_t c = (uint32_t)harness_in[first + i];
        if (!started) {
            started = 1;
            prev = c;
            g = FLT_GRID_TICKS;
            base = R(0.0);
            continue;
        }
#if FLT_STAMP
        {
            real d = (real)((c - prev) & FLT_INPUT_MASK);
            while (g < d) {                  /* grid instants before this stamp */
                real f = g / d;              /* phase since the last stamp, in edges */
                grid(base + f);
                base = -f;
                g += FLT_GRID_TICKS;
            }
            base += R(1.0);
            g -= d;
        }
#else
        grid((real)((c - prev) & FLT_INPUT_MASK));
#endif
        prev = c;
    }
    harness_consumed = i;
    return (uint32_t)produced;
}
