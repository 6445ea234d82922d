"""One tiny sweep per test session, shared by tests/test_sweep.py and tests/test_compare.py (invented data)."""

from __future__ import annotations

import functools
from pathlib import Path

#: Variants of the tiny sweep; ``broken`` is made to fail (tests patch ladder.fit for its seed).
VARIANTS = """
[variants.no_metallicity]
model.metallicity = false

[variants.long_periods]
data.period_min = 8.0

[variants.broken]
sampler.seed = 99
"""
BROKEN_SEED = 99


def tiny_mock(root: Path, variants: str = VARIANTS, name: str = "mock") -> Path:
    """A four-galaxy mock (2 anchors, 120 Cepheids), 2 chains x (150 + 150); returns its run file."""
    from ladder.simulate import MockSettings, simulate, write_mock

    mock = simulate(MockSettings(n_hosts=4, n_anchors=2, n_cepheids=120), seed=3)
    paths = write_mock(mock, root / name, run_overrides={"sampler": {"chains": 2, "warmup": 150, "draws": 150,
                                                                     "progress": False}})
    run = paths["run"]
    run.write_text(run.read_text(encoding="utf-8") + variants, encoding="utf-8")
    return run


class _Broken:
    """ladder.fit that raises for the ``broken`` variant's seed (a crash inside one variant's fit)."""

    def __init__(self, fit):
        self.fit, self.calls = fit, []

    def __call__(self, data, model, sampler, limits):
        self.calls.append(sampler.seed)
        if sampler.seed == BROKEN_SEED:
            raise RuntimeError("simulated crash in the sampler")
        return self.fit(data, model, sampler, limits)


@functools.cache
def tiny_sweep(root: str):
    """Run the tiny sweep in process into ``root/out``; returns (run file, out dir, table, progress lines)."""
    import ladder
    from ladder.sweep import run_sweep

    root = Path(root)
    run = tiny_mock(root)
    lines: list[str] = []
    patched = _Broken(ladder.fit)
    original, ladder.fit = ladder.fit, patched
    try:
        table = run_sweep(run, root / "out", in_process=True, progress=lines.append)
    finally:
        ladder.fit = original
    return run, root / "out", table, lines, patched.calls
