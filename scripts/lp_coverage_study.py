"""Coverage of 90% local-projection bands with known impulse responses (the study behind the
README's coverage table; the designs are described in tests/lp_coverage.py).

Run from the repository root (seeded; about 0.1-0.3 s per replication on 2 cores):
    python scripts/lp_coverage_study.py REPS [cell ...]
cells: iid200 persistent200 iid1000 persistent1000 nolags200 nolags1000 (default: all)."""

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tests import lp_coverage as C  # noqa: E402

CELLS = {"iid200": ("iid shock", 200), "persistent200": ("persistent shock", 200),
         "iid1000": ("iid shock", 1000), "persistent1000": ("persistent shock", 1000)}


def main(argv) -> None:
    reps = int(argv[1]) if len(argv) > 1 else 500
    cells = argv[2:] or list(CELLS) + ["nolags200", "nolags1000"]
    for cell in cells:
        t0 = time.process_time()
        if cell.startswith("nolags"):
            T = int(cell[len("nolags"):])
            cov = C.run_no_lags(reps=reps, T=T)
            print(f"\n## no lags (p = 0), persistent shock: T = {T}, {reps} replications, "
                  f"CPU {time.process_time() - t0:.0f} s")
            print(cov.round(3).to_markdown())
            continue
        dgp, T = CELLS[cell]
        cov, wid, sim = C.run(dgp, reps=reps, T=T)
        print(f"\n## {dgp}: T = {T}, H = 12, rho = 0.9" + ("" if dgp == "iid shock" else
                                                           ", phi = 0.8")
              + f", {reps} replications, CPU {time.process_time() - t0:.0f} s")
        print(cov.round(3).to_markdown())
        print("\nmean band width (h = 0, 4, 8, 12)")
        print(wid.round(2).iloc[[0, 4, 8, 12]].to_markdown())
        print("\nsimultaneous coverage:", {k: round(v, 3) for k, v in sim.items()})
        print(f"Monte Carlo standard error at 0.90: {C.mc_se(0.9, reps):.4f}")
        sys.stdout.flush()


if __name__ == "__main__":
    main(sys.argv)
