"""Everything a report shows, computed: verify (with the emulated target runs if asked), every
sweep and every hostile scenario, then the page and the WAV files (edgetally.report). Pure:
returns bytes; the CLI writes them and draws the progress."""

from __future__ import annotations

from dataclasses import dataclass

from ..check import hostbuild
from ..measure import hostile
from . import page as report
from ..measure import sweeps
from ..ir import Design
from ..planner.choose import Plan
from ..spec import Spec
from ..stimulus.inputs import DEFAULT_SEED
from ..check.verify import VerifyResult, verify


class _Quiet:
    def note(self, label: str) -> None:
        pass

    def step(self, n: int = 1) -> None:
        pass


@dataclass(frozen=True)
class Made:
    files: dict  # {file name: bytes}: the page and its WAVs
    verify: VerifyResult
    sweeps: tuple  # edgetally.sweeps.Sweep, one per kind
    hostile: tuple  # edgetally.hostile.ScenarioResult, one per scenario

    @property
    def failed_scenarios(self) -> list[str]:
        return [h.name for h in self.hostile if not h.passed]

    @property
    def sweeps_bit_exact(self) -> bool:
        return all(s.bit_exact for s in self.sweeps)

    @property
    def ok(self) -> bool:
        """The one verdict (edgetally.check.verify.VerifyResult.ok, the emulated targets included),
        every sweep point bit-exact and every scenario passed."""
        return self.verify.ok and self.sweeps_bit_exact and not self.failed_scenarios


def steps(design: Design) -> int:
    """How many progress steps ``make`` takes: verify, each sweep point, each scenario, the files."""
    extra = 1 if design.data is not None else 0  # the data link's figures
    return 1 + sum(len(sweeps.default_points(design, k)) for k in sweeps.KINDS) + len(hostile.SCENARIOS) + 1 + extra


def make(
    spec: Spec,
    plan: Plan,
    design: Design,
    seconds: float | None = None,
    seed: int = DEFAULT_SEED,
    targets: bool = True,
    progress=None,
) -> Made:
    """Run everything and render. ``progress`` (optional) has note(label), told what starts, and
    step(), told when one of ``steps(design)`` steps is done."""
    bar = progress or _Quiet()
    host = hostbuild.build(design)
    bar.note("verify" + (" (with the emulated target cores)" if targets else ""))
    res = verify(design, seconds=seconds, seed=seed, targets=targets, squelch=True)
    bar.step()
    sw = []
    for kind in sweeps.KINDS:
        bar.note(f"sweep {kind}")
        sw.append(sweeps.run_sweep(design, kind, seed=seed, host=host, progress=lambda _d, _t: bar.step()))
    hs = []
    for name in hostile.SCENARIOS:
        bar.note(name)
        hs.append(hostile.run_scenario(design, name, host, hostile.Options(seed=seed)))
        bar.step()
    data = None
    if design.data is not None:
        from . import datalink

        bar.note("data link: bit-error rate, eye, lock time")
        data = datalink.figures(design, host, seed)
        bar.step()
    bar.note("listening files and the page")
    files = report.report_files(spec, plan, design, res, tuple(sw), tuple(hs), seed=seed, host=host, data=data)
    bar.step()
    return Made(files=files, verify=res, sweeps=tuple(sw), hostile=tuple(hs))
