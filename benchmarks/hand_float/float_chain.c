/* Baseline for bench_target.py: the same demodulator chain written by hand in plain floating point
 * (double), the way a user might write it without a fixed-point design: linear interpolation of
 * the phase between stamps (or the count difference), a CIC as a cascade of moving sums, a one-pole
 * DC tracker, direct-form I biquads, rounding and clipping to int16. Compiled with soft float
 * (libgcc) for the same core and run in the same emulator. Not bit-exact with anything; only its
 * cost is of interest. The constants come from float_params.h, written by the benchmark. */
#include <stdint.h>
#include <stddef.h>
#include "float_params.h"

#define HARNESS_IN_LEN  4096u
#define HARNESS_OUT_LEN 4096u

FLT_INPUT_T harness_in[HARNESS_IN_LEN];
int16_t harness_out[HARNESS_OUT_LEN];
uint32_t harness_consumed;
const uint32_t harness_state_size = 0u;

void harness_init(void);
uint32_t harness_process(uint32_t first, uint32_t n);

static double ring[FLT_CIC_ORDER][FLT_CIC_RATIO];
static double msum[FLT_CIC_ORDER];
static unsigned ring_pos;
static unsigned dec;
static double dc;
static double zx[FLT_NSEC][2], zy[FLT_NSEC][2];
static int started;
static uint32_t prev;          /* last raw input */
static double t_prev, p_prev, g, p_last;
static size_t produced;

void harness_init(void)
{
    unsigned i, j;
    for (i = 0u; i < FLT_CIC_ORDER; i++) {
        msum[i] = 0.0;
        for (j = 0u; j < FLT_CIC_RATIO; j++) {
            ring[i][j] = 0.0;
        }
    }
    for (i = 0u; i < FLT_NSEC; i++) {
        zx[i][0] = zx[i][1] = zy[i][0] = zy[i][1] = 0.0;
    }
    ring_pos = 0u;
    dec = 0u;
    dc = 0.0;
    started = 0;
    prev = 0u;
    t_prev = p_prev = g = p_last = 0.0;
}

static void post(double y)
{
    unsigned k;
    double v, o;
    dc += (y - dc) * FLT_DC_ALPHA;
    v = (y - dc) * FLT_GAIN;
    for (k = 0u; k < FLT_NSEC; k++) {
        const double *c = flt_sos[k];
        double w = c[0] * v + c[1] * zx[k][0] + c[2] * zx[k][1] - c[4] * zy[k][0] - c[5] * zy[k][1];
        zx[k][1] = zx[k][0];
        zx[k][0] = v;
        zy[k][1] = zy[k][0];
        zy[k][0] = w;
        v = w;
    }
    o = v * 32767.0;
    if (o > 32767.0) {
        o = 32767.0;
    } else if (o < -32768.0) {
        o = -32768.0;
    }
    harness_out[produced++] = (int16_t)(o < 0.0 ? o - 0.5 : o + 0.5);
}

static void grid(double x)
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
            t_prev = 0.0;
            g = FLT_GRID_TICKS;
            continue;
        }
#if FLT_STAMP
        {
            double d = (double)((c - prev) & FLT_INPUT_MASK);
            double t = t_prev + d;
            while (g < t) {
                double p = p_prev + (g - t_prev) / d;
                grid(p - p_last);
                p_last = p;
                g += FLT_GRID_TICKS;
            }
            p_prev += 1.0;
            t_prev = t;
        }
#else
        grid((double)((c - prev) & FLT_INPUT_MASK));
#endif
        prev = c;
    }
    harness_consumed = i;
    return (uint32_t)produced;
}
