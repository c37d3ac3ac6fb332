"""edgetally replay SPEC RECORDING: run the emitted C and the model on a recording, bit for bit, and
write the output WAV and a page with the summary and plots. Exit 0 bit-exact, 1 not, 2 a bad spec,
argument or recording (one line naming the file and the line or offset)."""

from __future__ import annotations

import json
import math
from pathlib import Path

from .folder import FORCE_HELP, check_folder, write_set

FORMATS = ("vcd", "csv", "bin", "wav", "sigmf")  # edgetally.stimulus.recordings.FORMATS
SCHEMES = ("timestamp", "interrupt", "counter")


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "replay",
        help="run the emitted C and the model on your own recording (logic-analyzer "
        "VCD, logged stamps or counts, IQ WAV or SigMF)",
    )
    p.add_argument("spec", help="the TOML spec file")
    p.add_argument("recording", help="the recording (for SigMF the .sigmf-meta file)")
    p.add_argument(
        "--scheme",
        choices=SCHEMES,
        default=None,
        help="force how the MCU sees the edges (default: the planner's choice)",
    )
    p.add_argument(
        "--format", choices=FORMATS, default=None, help="the recording's format (default: from its extension)"
    )
    p.add_argument(
        "--signal",
        default=None,
        metavar="NAME",
        help="VCD: the IF pin's signal (full dotted name or its last part); CSV: the column by header "
        "name or 1-based number",
    )
    p.add_argument(
        "--edge",
        choices=("rising", "falling"),
        default="rising",
        help="the IF edge the design's hardware sees (default rising)",
    )
    p.add_argument(
        "--offset-hz",
        type=float,
        default=0.0,
        metavar="HZ",
        help="IQ: the channel's frequency minus the recording's centre (default 0)",
    )
    p.add_argument("--endian", choices=("little", "big"), default="little", help="bin: byte order (default little)")
    p.add_argument(
        "--word-bits",
        type=int,
        choices=(16, 32, 64),
        default=None,
        help="bin: bits per word (default the timer's or counter's width; wider words are unwrapped values)",
    )
    p.add_argument("--json", action="store_true", help="print the summary as one JSON object")
    p.add_argument(
        "-o", "--out", required=True, metavar="DIR", help="folder for the WAV and the page (made if missing)"
    )
    p.add_argument("--force", action="store_true", help=FORCE_HELP)


def run(args) -> int:
    """The command; errors go up to main (SpecError, UsageError, RecordingError -> exit 2)."""
    from .main import UsageError, json_safe, warn_spec
    from ..spec import load_spec

    if not math.isfinite(args.offset_hz):
        raise UsageError(f"--offset-hz {args.offset_hz}: must be a finite frequency in Hz")
    spec = load_spec(args.spec)
    warn_spec(spec)
    out = Path(args.out)
    check_folder(out, (f"{spec.name}_replay.wav", f"{spec.name}_replay.html"), args.force)
    from ..check.replay import replay, replay_files, summary_lines
    from ..check.choice import design as make_design
    from ..stimulus.recordings import RecordingError, load

    d = make_design(spec, scheme=args.scheme)
    try:
        rec = load(d, args.recording, args.format, args.signal, args.edge, args.offset_hz, args.endian, args.word_bits)
    except RecordingError as e:
        raise UsageError(str(e)) from None
    res = replay(d, rec)
    files = replay_files(d, rec, res)
    write_set(out, files, args.force)
    if args.json:
        print(json.dumps(json_safe({**res.to_dict(), "files": [str(out / n) for n in files]}), indent=2))
    else:
        print("\n".join(summary_lines(d, res)))
        for n in files:
            print(f"written: {out / n}")
    return 0 if res.bit_exact else 1
