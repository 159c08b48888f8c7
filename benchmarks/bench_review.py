"""Prints how drawing a second-read sample scales with population size (ratios, measured in one run)."""

from __future__ import annotations

import random
import time

from casefile.review.plans import draw_plan


def _population(n: int) -> list[dict]:
    rng = random.Random(0)
    return [{"case_id": f"c{i}", "seq": i + 1, "label": rng.choice("ab"),
             "status": rng.choice(["pass", "warn", "fail", "not-run"]), "flagged": int(rng.random() < 0.1)}
            for i in range(n)]


def _time(plan: str, pop: list[dict], **kw: object) -> float:
    start = time.perf_counter()
    for seed in range(5):
        draw_plan(plan, pop, seed=seed, **kw)
    return (time.perf_counter() - start) / 5


def main() -> None:
    small, large = _population(1_000), _population(100_000)
    for plan, kw in [("random", {"size": 50}), ("stratified", {"size": 50, "strata": "label+status"}),
                     ("risk", {"share": 0.05}), ("lot", {"aql": 1.0})]:
        a, b = _time(plan, small, **kw), _time(plan, large, **kw)
        print(f"{plan:<11} population x100 -> time x{b / a:.0f}")


if __name__ == "__main__":
    main()
