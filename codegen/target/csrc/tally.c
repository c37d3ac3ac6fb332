/* Block tally for unicorn (host code, not target code): a UC_HOOK_BLOCK callback that counts the
 * executions of each translated block by the context it was entered in, so that the Python side
 * decodes each block once and multiplies (edgetally.target.cycles). The context is the role of the
 * last instruction run that belongs to a role (0: none yet); instructions outside every role count
 * for the role of the code that called them. fall[] counts the times the next block started right
 * after this one (a conditional branch at its end was not taken). */
#include <stdint.h>

typedef struct {
    uint64_t base;          /* address of slot 0; a slot is 2 bytes (the instruction alignment) */
    uint64_t nslots;
    uint32_t nctx;          /* roles + 1 */
    uint32_t ctx;           /* the current context */
    const uint8_t *role;    /* [nslots] the role of the instruction covering the slot, 0: none */
    uint64_t *count;        /* [nslots * nctx] block executions by entry context */
    uint64_t *fall;         /* [nslots * nctx] fall-through into the next block */
    uint32_t *size;         /* [nslots] block size in bytes */
    int64_t prev;           /* index into count[] of the previous block, -1: none */
    uint64_t prev_end;
    uint32_t active;
} et_tally;

void et_tally_block(void *uc, uint64_t addr, uint32_t size, void *user)
{
    et_tally *t = (et_tally *)user;
    uint64_t s, k, i;
    (void)uc;
    if (!t->active || addr < t->base) {
        return;
    }
    s = (addr - t->base) >> 1;
    if (s >= t->nslots) {
        return;
    }
    if (t->prev >= 0 && addr == t->prev_end) {
        t->fall[t->prev]++;
    }
    k = s * t->nctx + t->ctx;
    t->count[k]++;
    t->size[s] = size;
    for (i = (uint64_t)(size >> 1); i-- > 0u;) {
        if (s + i < t->nslots && t->role[s + i] != 0u) {
            t->ctx = t->role[s + i];
            break;
        }
    }
    t->prev = (int64_t)k;
    t->prev_end = addr + size;
}

/* A runaway guard: counts the executed blocks of a call and stops the emulation past a limit (the
 * caller then sees the stop address was not reached). Cheaper than unicorn's instruction-count
 * limit (a hook on every instruction) or its timeout (a thread per call). */
typedef struct {
    uint64_t blocks;
    uint64_t limit;
    int (*stop)(void *uc);      /* uc_emu_stop */
} et_guard;

void et_guard_block(void *uc, uint64_t addr, uint32_t size, void *user)
{
    et_guard *g = (et_guard *)user;
    (void)addr;
    (void)size;
    if (++g->blocks > g->limit) {
        g->stop(uc);
    }
}
