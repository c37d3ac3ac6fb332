/* A small driver for simavr's library (host code, not target code), loaded by
 * edgetally.target.simavr through ctypes: make a part, load flash and RAM, call a function with the
 * avr-gcc calling convention and run it to its return, counting instructions and cycles (simavr's
 * cycle counter) by role, like edgetally.target.cycles does for unicorn. */
#include <stdarg.h>
#include <stdint.h>
#include <string.h>
#include <simavr/sim_avr.h>
#include <simavr/sim_core.h>

typedef struct {
    uint32_t nslots;        /* flash words */
    uint32_t nctx;          /* roles + 1 */
    uint32_t ctx;
    const uint8_t *role;    /* [nslots] role of the instruction covering the word, 0: none */
    uint64_t *insns;        /* [nctx] */
    uint64_t *cycles;       /* [nctx] */
    uint64_t *calls;        /* [nslots] times an instruction at the word started a call (entry words) */
    const uint8_t *entry;   /* [nslots] 1 at the entries whose calls are counted */
    uint32_t active;
} et_avr_tally;

static void quiet(struct avr_t *avr, const int level, const char *format, va_list ap)
{
    (void)avr; (void)level; (void)format; (void)ap;
}

avr_t *et_avr_new(const char *mcu)
{
    avr_t *a;
    avr_global_logger_set(quiet);
    a = avr_make_mcu_by_name(mcu);
    if (a == NULL || avr_init(a) != 0) {
        return NULL;
    }
    a->log = 0;
    memset(a->data + a->ioend + 1, 0, (size_t)(a->ramend - a->ioend));
    a->codeend = a->flashend;
    return a;
}

uint32_t et_avr_ramend(avr_t *a) { return a->ramend; }
uint32_t et_avr_ioend(avr_t *a) { return a->ioend; }
uint32_t et_avr_flashend(avr_t *a) { return a->flashend; }

void et_avr_flash(avr_t *a, uint32_t addr, const uint8_t *src, uint32_t n)
{
    memcpy(a->flash + addr, src, n);
}

void et_avr_write(avr_t *a, uint32_t addr, const uint8_t *src, uint32_t n)
{
    memcpy(a->data + addr, src, n);
}

void et_avr_read(avr_t *a, uint32_t addr, uint8_t *dst, uint32_t n)
{
    memcpy(dst, a->data + addr, n);
}

/* The steps call avr_run_one (one instruction) directly: no peripherals or interrupts are used, so
 * the cycle timers and the interrupt check of avr_run have nothing to do. */

/* Call the function at byte address pc with up to two 32-bit arguments (r22..r25, r18..r21), the
 * return address 0 on the stack; run until pc is 0 again. Returns 0 on a normal return, 1 when
 * max_steps ran out, 2 when the core stopped or crashed. *ret gets r22..r25. */
int et_avr_call(avr_t *a, uint32_t pc, uint32_t arg0, uint32_t arg1, uint64_t max_steps, uint32_t *ret,
                et_avr_tally *t)
{
    uint16_t sp = (uint16_t)(a->ramend - 2u);
    uint64_t steps = 0u;
    int i;
    a->data[a->ramend] = 0u;
    a->data[a->ramend - 1u] = 0u;
    a->data[R_SPL] = (uint8_t)(sp & 0xFFu);
    a->data[R_SPH] = (uint8_t)(sp >> 8);
    a->data[1] = 0u;                    /* __zero_reg__ */
    for (i = 0; i < 4; i++) {
        a->data[22 + i] = (uint8_t)(arg0 >> (8 * i));
        a->data[18 + i] = (uint8_t)(arg1 >> (8 * i));
    }
    for (i = 0; i < 8; i++) {
        a->sreg[i] = 0u;
    }
    a->pc = pc;
    a->state = cpu_Running;
    while (a->pc != 0u) {
        if (steps++ >= max_steps) {
            return 1;
        }
        if (t != NULL && t->active) {
            uint32_t w = a->pc >> 1;
            avr_cycle_count_t c0 = a->cycle;
            if (w < t->nslots) {
                if (t->role[w] != 0u) {
                    t->ctx = t->role[w];
                }
                if (t->entry[w] != 0u) {
                    t->calls[w]++;
                }
            }
            a->pc = avr_run_one(a);
            t->insns[t->ctx]++;
            t->cycles[t->ctx] += (uint64_t)(a->cycle - c0);
        } else {
            a->pc = avr_run_one(a);
        }
        if (a->state != cpu_Running) {
            return 2;
        }
    }
    *ret = (uint32_t)a->data[22] | ((uint32_t)a->data[23] << 8) | ((uint32_t)a->data[24] << 16)
           | ((uint32_t)a->data[25] << 24);
    return 0;
}

uint32_t et_avr_sp(avr_t *a) { return (uint32_t)a->data[R_SPL] | ((uint32_t)a->data[R_SPH] << 8); }

void et_avr_free(avr_t *a)
{
    avr_terminate(a);
}
