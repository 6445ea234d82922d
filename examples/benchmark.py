"""Benchmark: wall time and ESS per second of the demo fit (and of a multiband mock). Not a test.

    python examples/benchmark.py            # writes a line per case to stdout
"""

import time
from pathlib import Path

import ladder
from ladder.simulate import MockSettings, simulate, write_mock

HERE = Path(__file__).parent


def _run(run_path):
    cfg = ladder.load_run(run_path)
    data = ladder.load_data(cfg)
    t0 = time.perf_counter()
    r = ladder.fit(data, cfg.model, cfg.sampler, cfg.diagnostics)
    total = time.perf_counter() - t0
    d = r.diagnostics
    return (f"{data.n_stars} stars, {data.n_hosts} galaxies, {d.chains}x{d.draws} draws: total {total:.1f} s, "
            f"sampling {d.wall_seconds:.1f} s, min bulk ESS {d.min_ess_bulk:.0f} "
            f"({d.min_ess_bulk / d.wall_seconds:.0f}/s), passed={d.passed}")


if __name__ == "__main__":
    print("demo:", _run(HERE / "demo" / "run.toml"))
    mock = simulate(MockSettings(reddening_law="fitzpatrick99"), seed=1)
    out = Path("/tmp/ladder-benchmark-multiband")
    paths = write_mock(mock, out, run_overrides={"model": {"band": None, "extinction": "multiband",
                                                           "reddening": {"law": "fitzpatrick99", "rv_err": 0.3}}})
    print("multiband:", _run(paths["run"]))
