"""Prints how often flags fire on the demo's honest and shortcut models, per check and over thresholds.

    .venv/bin/python benchmarks/bench_flags.py [SEED ...]      (default seeds 7 11 23; 7 is the demo's)

For each scenario seed it builds the synthetic scenario, trains both models and explains all 40
cases with each (no sheets), then prints, from that one run:
- the share of cases flagged under the default flag policy (goal: at most 10 % of honest cases, at
  least 90 % of shortcut cases), and how many of the honest model's wrong answers were flagged;
- per check, how many cases it flagged, warned or failed;
- the share flagged if region focus's pass threshold, confidence's margin, or a check's rule were
  different (recomputed from the recorded values, so each line is the same cases under one change);
- the old rule, "any warn or fail sends the case to a reader", for comparison.
Seed 7 is the held-in data the defaults were checked on; the other seeds are held out. Nothing is
asserted here; tests/pipeline/test_demo_flags.py checks the goals on the demo itself.
"""

from __future__ import annotations

import json
import sys
import tempfile
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

from casefile.demo import DEMO_PATCH, DEMO_STRIDE
from casefile.explain import CHECK_DEFAULTS
from casefile.flags import DEFAULT_FLAG_POLICY, flags
from casefile.ledger import Ledger
from casefile.models import load_model
from casefile.pipeline import RunSettings, explain_batch
from demo_cases.build import build_scenario
from demo_cases.train import ENTRY_POINT

Case = dict[str, Any]


def run_seed(seed: int, folder: Path) -> list[Case]:
    """Every case of one scenario seed with both models: model, truth, scores and check outcomes/values."""
    scen = build_scenario(folder / "scenario", seed=seed, n_cases=40)
    truth = json.loads(Path(scen["truth"]).read_text())["files"]
    ledger = Ledger(str(folder / "casefile.db"))
    cases: list[Case] = []
    for name in ("honest", "shortcut"):
        paths = scen[name]
        loaded = load_model(paths["weights"], paths["card"], trusted_entry_points=[ENTRY_POINT])
        summary = explain_batch(ledger, [scen["dir"] / "inputs"], loaded, RunSettings(patch=DEMO_PATCH,
                                stride=DEMO_STRIDE), key=str(folder / "site.key"), progress=False)
        for out in summary.outcomes:
            b = out.body or {}
            cases.append({"model": name, "right": b["result"]["label"] == truth[b["input"]["file_name"]]["label"],
                          "scores": b["result"]["scores"], "flagged": b["flagged"],
                          "checks": {c["name"]: (c["outcome"], c["value"]) for c in b["checks"]}})
    ledger.close()
    return cases


def outcomes(case: Case, focus_pass: float, margin: float) -> dict[str, str]:
    """The case's outcomes with region focus and confidence recomputed under other thresholds."""
    out = {n: o for n, (o, _) in case["checks"].items()}
    share = case["checks"]["region_focus"][1]
    if share is not None:
        lo = CHECK_DEFAULTS["focus_fail"]
        out["region_focus"] = "pass" if share >= focus_pass else ("warn" if share >= lo else "fail")
    p = sorted(case["scores"].values(), reverse=True)
    gap = p[0] - p[1]
    out["confidence"] = "fail" if gap < margin else ("warn" if p[0] < CHECK_DEFAULTS["confidence_warn"] else "pass")
    return out


Rule = Callable[[dict[str, str]], bool]


def by_policy(policy: Mapping[str, str]) -> Rule:
    return lambda outs: any(flags(n, o, policy) for n, o in outs.items())


def share(cases: list[Case], model: str, rule: Rule, focus_pass: float = CHECK_DEFAULTS["focus_pass"],
          margin: float = CHECK_DEFAULTS["confidence_margin"]) -> str:
    mine = [c for c in cases if c["model"] == model]
    k = sum(1 for c in mine if rule(outcomes(c, focus_pass, margin)))
    return f"{k:>2}/{len(mine)} ({100 * k / len(mine):3.0f} %)"


def report(seed: int, cases: list[Case]) -> None:
    default = by_policy(DEFAULT_FLAG_POLICY)
    honest = [c for c in cases if c["model"] == "honest"]
    wrong = [c for c in honest if not c["right"]]
    caught = sum(1 for c in wrong if c["flagged"])
    held = "held in: the demo's seed" if seed == 7 else "held out"
    print(f"\nseed {seed} ({held})")
    print(f"  {'default policy':<31} honest {share(cases, 'honest', default)}   shortcut {share(cases, 'shortcut', default)}"
          f"   honest model's wrong answers flagged: {caught}/{len(wrong)}")
    for name in DEFAULT_FLAG_POLICY:
        row = []
        for model in ("honest", "shortcut"):
            mine = [c for c in cases if c["model"] == model]
            o = [c["checks"][name][0] for c in mine]
            row.append(f"{model} flags {sum(1 for c in mine if flags(name, c['checks'][name][0])):>2} "
                       f"warn {o.count('warn'):>2} fail {o.count('fail'):>2}")
        print(f"  {name:<16} ({DEFAULT_FLAG_POLICY[name]:<12}) " + "   ".join(row))
    for fp in (0.7, 0.75, 0.85, 0.9):
        print(f"  region focus pass at {fp:<4}       honest {share(cases, 'honest', default, focus_pass=fp)}   "
              f"shortcut {share(cases, 'shortcut', default, focus_pass=fp)}")
    for m in (0.05, 0.15, 0.2):
        print(f"  confidence margin {m:<4}          honest {share(cases, 'honest', default, margin=m)}   "
              f"shortcut {share(cases, 'shortcut', default, margin=m)}")
    for name, rule in (("confidence", "flag-on-warn"), ("confidence", "note"), ("deletion", "flag-on-fail"),
                       ("randomisation", "flag-on-warn"), ("region_focus", "flag-on-fail")):
        alt = by_policy({**DEFAULT_FLAG_POLICY, name: rule})
        print(f"  {name + ' as ' + rule:<31} honest {share(cases, 'honest', alt)}   shortcut {share(cases, 'shortcut', alt)}")
    old = by_policy(dict.fromkeys(DEFAULT_FLAG_POLICY, "flag-on-warn"))
    print(f"  {'old rule: any warn or fail':<31} honest {share(cases, 'honest', old)}   shortcut {share(cases, 'shortcut', old)}")


def main(seeds: list[int]) -> None:
    print("Flags on the demo scenario: share of cases sent to a person (goal: honest <= 10 %, shortcut >= 90 %)")
    for seed in seeds:
        with tempfile.TemporaryDirectory(prefix=f"bench-flags-{seed}-") as tmp:
            report(seed, run_seed(seed, Path(tmp)))


if __name__ == "__main__":
    main([int(a) for a in sys.argv[1:]] or [7, 11, 23])
