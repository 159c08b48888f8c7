"""The demo: the whole job on a synthetic scenario of our own (cast-part radiographs, two tiny models)."""

from __future__ import annotations

import json
import os
import sys
import time
from pathlib import Path
from typing import Any

from casefile.cautions import CAUTION_TEXT
from casefile.ledger import Ledger, generate_key

# Occlusion on the 64-pixel demo models: 16-pixel patches (a quarter of the side), stride 8 → 7×7 grid.
DEMO_PATCH, DEMO_STRIDE = 16, 8


def _say(msg: str) -> None:
    print(msg, flush=True)


FLAG_GOALS = {"honest": 0.10, "shortcut": 0.90}  # at most 10 % of honest cases flagged, at least 90 % of shortcut


def flag_rates(outcomes: list[Any], truth: dict[str, Any]) -> dict[str, Any]:
    """Flags on one model's cases: the share flagged (sent to a person), per check, and region focus's
    fails and warns with and without the corner marker."""
    counts = {True: [0, 0], False: [0, 0]}
    flagged, cases = 0, 0
    by_check: dict[str, int] = {}
    for out in outcomes:
        if out.body is None:
            continue
        cases += 1
        flagged += bool(out.body.get("flagged"))
        for name in out.body.get("flags", []):
            by_check[name] = by_check.get(name, 0) + 1
        marker = truth[Path(out.input).name]["marker"]
        focus = {c["name"]: c["outcome"] for c in out.body["checks"]}.get("region_focus")
        counts[marker][1] += 1
        counts[marker][0] += focus in ("fail", "warn")
    rate = {k: (v[0] / v[1] if v[1] else None) for k, v in counts.items()}
    return {"flagged": flagged, "cases": cases, "share_flagged": flagged / cases if cases else None,
            "by_check": dict(sorted(by_check.items())),
            "with_marker": rate[True], "without_marker": rate[False],
            "flagged_with_marker": counts[True][0], "cases_with_marker": counts[True][1],
            "flagged_without_marker": counts[False][0], "cases_without_marker": counts[False][1]}


def simulated_reviews(ledger: Ledger, draw_body: dict[str, Any], truth: dict[str, Any]) -> int:
    """A simulated reader (the scenario's ground truth) reads every drawn case; marked as simulated."""
    from casefile.review import record_review

    reader = "demo-reader (simulated)"
    done = {r["case_id"] for r in ledger.rows("reviews")
            if r["reader"] == reader and r["draw_id"] == draw_body["draw_id"]}
    n = 0
    for member in draw_body["members"]:
        if member["case_id"] in done:  # running the demo again adds no second copy of a review
            continue
        case = ledger.case(member["case_id"]).entry.body
        true_label = truth[case["input"]["file_name"]]["label"]
        verdict = "agree" if case["result"]["label"] == true_label else "disagree"
        record_review(ledger, member["case_id"], reader=reader, verdict=verdict, draw_id=draw_body["draw_id"],
                      label=true_label, note="simulated second read from the demo scenario's ground truth")
        n += 1
    return n


def run_demo(out_dir: str | os.PathLike[str], *, seed: int = 7, n_cases: int = 40) -> int:
    """Build the scenario, explain every case with both models, render sheets, sample, seal, verify."""
    from casefile.models import load_model
    from casefile.pipeline import RunSettings, explain_batch
    from casefile.review import describe_draw, draw, format_text, summarise
    from demo_cases.build import build_scenario
    from demo_cases.train import ENTRY_POINT

    t0 = time.perf_counter()
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    _say(f"casefile demo → {out.resolve()}")
    _say("1/6 generating the scenario (synthetic radiographs of cast parts) and training two tiny models …")
    scen = build_scenario(out / "scenario", seed=seed, n_cases=n_cases)
    truth = json.loads(Path(scen["truth"]).read_text())["files"]
    ledger = Ledger(str(out / "casefile.db"))
    site_key = str(out / "site.key")
    run = RunSettings(patch=DEMO_PATCH, stride=DEMO_STRIDE)
    results: dict[str, Any] = {}
    for step, name in ((2, "honest"), (3, "shortcut")):
        paths = scen[name]
        # the demo vouches for its own factory, by exact name, and for nothing else
        loaded = load_model(paths["weights"], paths["card"], trusted_entry_points=[ENTRY_POINT])
        _say(f"{step}/6 explaining {n_cases} cases with the {loaded.card['name']} model (weights SHA-256 "
             f"{loaded.digest[:16]}…) …")
        summary = explain_batch(ledger, [scen["dir"] / "inputs"], loaded, run, key=site_key,
                                sheet_dir=out / "sheets" / name, progress=sys.stderr.isatty())
        _say("    " + summary.text().replace("\n", "\n    "))
        results[name] = {"summary": summary, "rates": flag_rates(summary.outcomes, truth),
                         "model": loaded.card["name"]}

    _say("4/6 drawing a second-read sample (risk plan: every flagged case plus a simple random sample of the "
         "rest, at least 5) …")
    d = draw(ledger, "risk", share=0.2, seed=seed)
    _say("    " + describe_draw(d.body).replace("\n", "\n    "))
    n_rev = simulated_reviews(ledger, d.body, truth)
    _say(f"    {n_rev} simulated second reads recorded (reader 'demo-reader (simulated)')")
    stats_text = format_text(summarise(ledger))

    _say("5/6 sealing the ledger with an Ed25519 key kept outside the database …")
    key = out / "seal.key"
    if not key.exists():
        generate_key(key)
    seal_path = out / "seal.json"
    ledger.seal(str(key), note="demo seal", output=seal_path)
    _say("6/6 verifying every entry, blob and query row against the seal and its trusted public key …")
    report = ledger.verify(str(seal_path), public_key=str(key) + ".pub")
    for line in report.lines() + [f"note: {n}" for n in report.notes]:
        _say("    " + line)

    _print_findings(out, results, stats_text, time.perf_counter() - t0)
    ledger.close()
    return 0 if report.ok else 1


def _pct(x: float | None) -> str:
    return "n/a" if x is None else f"{100 * x:.0f} %"


def _first_sheet(result: dict[str, Any], flagged_by: str | None) -> str | None:
    """The first sheet of a case flagged by a failure of check ``flagged_by`` (else by a warning of it), or,
    with None, of a case with no flag at all."""
    done = [o for o in result["summary"].outcomes if o.sheet and o.body]
    if flagged_by is None:
        picks = [o for o in done if not o.body.get("flags")]
    else:
        said = [(o, {c["name"]: c["outcome"] for c in o.body["checks"]}.get(flagged_by)) for o in done
                if flagged_by in o.body.get("flags", [])]
        picks = [o for o, outcome in said if outcome == "fail"] + [o for o, _ in said]
    chosen = picks or done
    return chosen[0].sheet if chosen else None


def flag_line(who: str, r: dict[str, Any], goal: str) -> str:
    """One printed line: how many of a model's cases were flagged, against the goal, and by which checks."""
    checks = ", ".join(f"{n} {k}" for n, k in r["by_check"].items()) or "none"
    return (f"  {who}: {r['flagged']}/{r['cases']} cases flagged ({_pct(r['share_flagged'])}; goal {goal}); "
            f"flagged by: {checks}")


def _print_findings(out: Path, results: dict[str, Any], stats_text: str, seconds: float) -> None:
    h, s = results["honest"]["rates"], results["shortcut"]["rates"]
    _say("")
    _say("What the demo shows")
    _say("  The shortcut model was trained where a burned-in corner marker gives the label away. casefile's")
    _say(f"  region-focus check flags it: {s['flagged_with_marker']}/{s['cases_with_marker']} cases with the "
         f"marker ({_pct(s['with_marker'])}), {s['flagged_without_marker']}/{s['cases_without_marker']} "
         f"without.")
    _say(f"  On the honest model region focus warns or fails in {h['flagged_with_marker']}/{h['cases_with_marker']} "
         f"cases with the marker ({_pct(h['with_marker'])}) and {h['flagged_without_marker']}/"
         f"{h['cases_without_marker']} without.")
    _say("Flags (a check sent the case to a person; notes only inform)")
    _say(flag_line("honest model  ", h, f"at most {_pct(FLAG_GOALS['honest'])}"))
    _say(flag_line("shortcut model", s, f"at least {_pct(FLAG_GOALS['shortcut'])}"))
    _say("")
    _say("Second reads so far (casefile stats)")
    _say("  " + stats_text.split("\n", 1)[1].lstrip("\n").replace("\n", "\n  "))
    _say("")
    _say("Where everything is")
    _say(f"  ledger      {out / 'casefile.db'}   (casefile --store {out / 'casefile.db'} audit)")
    _say(f"  sheets      {out / 'sheets'}/honest, {out / 'sheets'}/shortcut   (one PDF per case)")
    _say(f"  seal        {out / 'seal.json'}   (signed; public key {out / 'seal.key.pub'})")
    _say(f"  scenario    {out / 'scenario'}   (inputs, models with their cards, truth.json)")
    _say("Open first")
    _say(f"  {_first_sheet(results['shortcut'], 'region_focus')}   a shortcut-model case flagged by region "
         "focus: see where it looked")
    _say(f"  {_first_sheet(results['honest'], None)}   the same job done honestly (no flag)")
    _say("")
    _say("Caution: " + CAUTION_TEXT)
    _say(f"(demo finished in {seconds:.0f} s)")
