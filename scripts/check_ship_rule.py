"""What the ship rule really does: seeded simulations through the one-test analysis (`archive analyze`).

* All-null tests (every arm at 3% conversion, 20,000 visitors per arm, planned size reached) for 2, 3, 5 and 10
  arms: the share of tests whose recommendation is "ship", against the rule's stated family-wise rate (alpha/2 for
  the positive side at the plan's alpha 0.05) and the rate derived by :func:`archive.analysis.verdict.null_ship_rates`;
  beside it the share the opt-in probability rule (``ship_on_probability``) would ship.
* Power: a 2-arm test sized by the two-proportion formula for +5% on a 3% baseline at power 0.8: the share that
  ships when the true lift is the planned +5%.

    python scripts/check_ship_rule.py [--sims 2000]

Progress goes to stderr. Invented numbers only.
"""

from __future__ import annotations

import argparse
import datetime as dt
import math
import sys
from typing import Any

import numpy as np

from archive.analysis import Settings, analyze
from archive.analysis.verdict import VerdictRules, null_ship_rates
from archive.records.model import Record
from archive.stats.power import visitors_per_arm


def _record(names: list[str], visitors: int, conversions: list[int]) -> Record:
    plan = {"visitors_per_arm": visitors, "minimum_lift": 0.05, "alpha": 0.05, "split": {x: 1.0 for x in names}}
    arms: list[dict[str, Any]] = [
        {"name": x, "control": x == "control", "visitors": visitors, "conversions": int(c)}
        for x, c in zip(names, conversions, strict=True)
    ]
    return Record.model_validate(
        {
            "id": "simulated",
            "title": "Simulated test",
            "status": "finished",
            "started": dt.date(2025, 3, 3),
            "ended": dt.date(2025, 3, 30),
            "page_area": "checkout",
            "themes": ["simulated"],
            "hypothesis": "h",
            "plan": plan,
            "arms": arms,
        }
    )


def ship_share(arms: int, visitors: int, rates: list[float], sims: int, seed: int, settings: Settings) -> float:
    rng = np.random.default_rng(seed)
    names = ["control"] + [f"t{i}" for i in range(1, arms)]
    counts = rng.binomial(visitors, np.asarray(rates), size=(sims, arms))
    ships = 0
    for i, row in enumerate(counts):
        ships += analyze(_record(names, visitors, list(row)), settings=settings).recommendation.action == "ship"
        if (i + 1) % 500 == 0:
            print(f"  {arms} arms: {i + 1}/{sims}", file=sys.stderr)
    return ships / sims


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--sims", type=int, default=2000)
    args = parser.parse_args()
    plain = Settings(bootstrap_replicates=20)
    probability = Settings(bootstrap_replicates=20, rules=VerdictRules(ship_on_probability=True))
    print("arms  null ship rate (MC SE)  derived  stated  probability rule")
    for arms in (2, 3, 5, 10):
        rate = ship_share(arms, 20_000, [0.03] * arms, args.sims, arms, plain)
        with_probability = ship_share(arms, 20_000, [0.03] * arms, args.sims, arms, probability)
        derived, _ = null_ship_rates(arms - 1, 0.05, VerdictRules())
        se = math.sqrt(max(rate * (1 - rate), 1e-12) / args.sims)
        print(f"{arms:4d}  {rate:8.2%} ({se:.2%})      {derived:6.2%}  {0.025:6.2%}  {with_probability:8.2%}")
    n = math.ceil(visitors_per_arm(0.03, 0.0315, alpha=0.05, power=0.8))
    power = ship_share(2, n, [0.03, 0.0315], args.sims, 11, plain)
    print(f"power at the planned +5% lift ({n:,} visitors per arm): {power:.3f} against the plan's 0.800")


if __name__ == "__main__":
    main()
