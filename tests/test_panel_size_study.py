"""Panel size study (slow, still in the default run; about a minute on 2 cores).

Simulated panels of 100 firms x 40 periods with the true slope of x equal to zero. The regressor
and the error each have a firm component, a time component (independent over time) and an
idiosyncratic part, with these shares of variance:
  firm:  firm component 50% of both x and the error (no time component),
  time:  time component 50% of both (no firm component),
  both:  25% firm and 25% time in both.
Rejection rate of the true null at 5% for: classical and HC1 (normal/t as each family states),
clustered by firm, by time, two-way, Driscoll-Kraay (Bartlett, Andrews rule), Fama-MacBeth
(classical). 400 replications per scenario: Monte Carlo s.e. about 1.1 points near 5%.

Expected pattern (Petersen 2009, Review of Financial Studies 22(1):435-480 [M: recalled]):
standard errors that ignore a dependence the data have are too small and over-reject: a firm
effect defeats classical, HC, clustering by time, Driscoll-Kraay and Fama-MacBeth (which only
handle correlation across firms within a period); a time effect defeats classical, HC and
clustering by firm, while clustering by time, Driscoll-Kraay and Fama-MacBeth hold their size;
two-way clustering holds its size in all three.
"""

import numpy as np
import pandas as pd
import pytest

import lagwise

pytestmark = pytest.mark.slow

ESTIMATORS = {
    "classical": lagwise.estimator("classical"),
    "HC1": lagwise.estimator("hc1"),
    "cluster firm": lagwise.estimator("cluster", by="entity"),
    "cluster time": lagwise.estimator("cluster", by="time"),
    "two-way": lagwise.estimator("cluster", by="both"),
    "Driscoll-Kraay": lagwise.estimator("driscoll_kraay", kernel="bartlett",
                                        bandwidth="andrews"),
}
SCENARIOS = {"firm": (0.5, 0.0), "time": (0.0, 0.5), "both": (0.25, 0.25)}


def simulate(rng, firms, periods, firm_share, time_share):
    e = np.repeat(np.arange(firms), periods)
    t = np.tile(np.arange(periods), firms)

    def series():
        idio = 1.0 - firm_share - time_share
        return (np.sqrt(firm_share) * rng.standard_normal(firms)[e]
                + np.sqrt(time_share) * rng.standard_normal(periods)[t]
                + np.sqrt(idio) * rng.standard_normal(firms * periods))
    return pd.DataFrame({"firm": e, "month": t, "x": series(), "y": series()})


def rates(scenario, reps=400, firms=100, periods=40, seed=2027):
    rng = np.random.default_rng(seed)
    hits = {name: 0 for name in [*ESTIMATORS, "Fama-MacBeth"]}
    for _ in range(reps):
        frame = simulate(rng, firms, periods, *SCENARIOS[scenario])
        fit = lagwise.fit_panel(frame, "y", ["x"], entity="firm", time="month")
        for name, est in ESTIMATORS.items():
            hits[name] += fit.infer(est).table.loc["x", "p_value"] < 0.05
        hits["Fama-MacBeth"] += fit.fama_macbeth().infer("classical").table.loc[
            "x", "p_value"] < 0.05
    return {name: h / reps for name, h in hits.items()}


@pytest.mark.parametrize("scenario", list(SCENARIOS))
def test_rejection_rates_follow_the_textbook_pattern(scenario):
    r = rates(scenario)
    print(f"\nPANEL SIZE STUDY ({scenario} effect) rejection rates at 5%: "
          + ", ".join(f"{k} {v:.3f}" for k, v in r.items()))
    holds = lambda name: 0.015 <= r[name] <= 0.095        # noqa: E731
    over = lambda name: r[name] >= 0.10                   # noqa: E731 (twice nominal)
    assert holds("two-way")
    if scenario == "firm":
        assert holds("cluster firm")
        assert all(over(n) for n in ("classical", "HC1", "cluster time", "Driscoll-Kraay",
                                     "Fama-MacBeth"))
    elif scenario == "time":
        assert holds("cluster time") and holds("Fama-MacBeth")
        assert r["Driscoll-Kraay"] <= 0.12
        assert all(over(n) for n in ("classical", "HC1", "cluster firm"))
    else:
        assert all(over(n) for n in ("classical", "HC1", "cluster firm", "cluster time"))
