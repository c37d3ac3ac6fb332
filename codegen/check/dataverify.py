"""verify's data part for a data design: framed FSK with IF noise (``stimulus.fsk.data_test``)
through the emitted C and the integer model: every bit compared, and the frames received against
the payloads sent."""

from __future__ import annotations

from ..ir import Design
from ..stimulus import fsk
from . import model
from .compare import compare


def data_check(design: Design, host, seconds: float, seed: int) -> dict:
    """The C (``host``, a check.hostbuild.HostDemod) against the model on the data test, as a plain
    dict for the verify result."""
    rec, pays = fsk.data_test(design, seconds, seed)
    want = model.run(design, rec.inputs)
    got, counters = host.process(rec.inputs)
    cmp = compare(got, counters, want)
    data = want.data
    assert data is not None
    sent = set(pays)
    return {
        "bit_exact": cmp.bit_exact,
        "bits": int(data.bits.size),
        "frames_sent": len(pays),
        "frames_received": len(data.frames),
        "frames_correct": sum(f in sent for f in data.frames),
        "ebn0_db": fsk.DATA_TEST_EBN0_DB,
        "rate_error": fsk.DATA_TEST_RATE_ERROR,
        "offset_of_deviation": fsk.DATA_TEST_OFFSET,
        "inputs": int(rec.inputs.size),
    }
