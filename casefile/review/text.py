"""Words for second reads: the ``stats`` summary and a recorded draw as lines a person reads.

Every figure says over how many of what it is computed (cases, readings, cases read by a pair), and a
figure without a point estimate says why in its warning line, exactly as the JSON summary does.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any


def _pct(x: float | None) -> str:
    return "n/a" if x is None else f"{100 * x:.1f} %"


def _kappa(k: float | None, n: int) -> str:
    if n == 0:
        return "no readings yet"
    return "n/a (undefined: every label the same)" if k is None else f"{k:.3f}"


def _rate_line(r: Mapping[str, Any]) -> str:
    if r["rate"] is None:
        return "no reviews yet (n = 0 cases)"
    low, high = r["wilson_95"]
    return (f"{r['disagreements']} of {r['reviewed']} reviewed cases disagree: {_pct(r['rate'])} "
            f"(95 % Wilson {_pct(low)} to {_pct(high)}, n = {r['reviewed']} cases)")


def _ids(ids: list[str]) -> str:
    return ", ".join(ids[:10]) + (", ..." if len(ids) > 10 else "")


def _agreement_lines(summary: Mapping[str, Any]) -> list[str]:
    ag = summary["agreement"]
    mv = ag["model_vs_reader"]
    lines = [f"Cohen's kappa, model vs reader labels: {_kappa(mv['kappa'], mv['readings'])} (n = {mv['readings']} readings)"]
    for p in ag["reader_pairs"]:
        lines.append(f"Cohen's kappa, {p['readers'][0]} vs {p['readers'][1]}: {_kappa(p['kappa'], p['cases'])} "
                     f"(n = {p['cases']} cases read by both)")
    fl = ag.get("fleiss")
    if fl:
        kappa = _kappa(fl["kappa"], fl["cases"]) if fl["cases"] else "n/a (no case labelled by all of them)"
        lines.append(f"Fleiss' kappa, {', '.join(fl['readers'])}: {kappa} "
                     f"(n = {fl['cases']} cases labelled by all {len(fl['readers'])} readers)")
    rc = summary.get("reader_conflicts")
    if rc and rc["cases"]:
        lines.append(f"Readers disagree with each other on {len(rc['cases'])} case(s); "
                     f"{len(rc['adjudicated'])} adjudicated" + (f"; open: {_ids(rc['open'])}" if rc["open"] else ""))
    rel = summary.get("reliability")
    if rel is not None:
        lines.append(_reliability_line(rel))
    conf = ag["confusion"]
    if conf["labels"]:
        width = max(len(x) for x in [*conf["labels"], "model \\ reader"]) + 2
        lines += ["", f"Model label (rows) by reader label (columns), n = {mv['readings']} readings:",
                  "model \\ reader".ljust(width) + "".join(x.rjust(width) for x in conf["labels"])]
        for m in conf["labels"]:
            lines.append(m.ljust(width) + "".join(str(conf["rows"][m][r]).rjust(width) for r in conf["labels"]))
    return lines


def _reliability_line(rel: Mapping[str, Any]) -> str:
    if rel["ece"] is None:
        return "Confidence against readers: no agree or disagree readings yet"
    return (f"Confidence against readers: expected calibration error {rel['ece']:.3f} over {len(rel['bins'])} "
            f"equal-width bins (n = {rel['n']} readings; agreement with readers, not accuracy)")


def _stratum_line(s: Mapping[str, Any]) -> str:
    head = f"    stratum {s['stratum']}: "
    if s["kind"] == "census":
        return head + f"every one of {s['size']} cases drawn, {s['disagreements']} of {s['reviewed']} disagree"
    drawn = f"{s['drawn']} of {s['size']} cases drawn (p = {s['inclusion_probability']:.3g})"
    if s["kind"] == "too few reviewed":
        return head + f"{drawn}, {s['reviewed']} reviewed: too few, its rate is bounded by 0 and 1"
    low, high = s["interval_95"]
    return (head + f"{drawn}, {s['disagreements']} of {s['reviewed']} disagree "
            f"(95 % Wilson, continuity-corrected, {_pct(low)} to {_pct(high)})")


def _weighted_lines(w: Mapping[str, Any]) -> list[str]:
    if "interval_95" not in w:
        return [f"  population estimate: not yet ({w['reason']})"]
    lo, hi = w["interval_95"]
    if w.get("estimate") is None:
        lines = [f"  population rate: no point estimate; between {_pct(lo)} and {_pct(hi)} "
                 f"(bounds, n = {w['reviewed']} cases)", f"  warning: {w['warning']}"]
    else:
        lines = [f"  population estimate: {_pct(w['estimate'])} (95 % {_pct(lo)} to {_pct(hi)}, "
                 f"n = {w['reviewed']} cases; {w['interval_method']})"]
    return lines + [_stratum_line(s) for s in w["strata"]]


def _draw_lines(d: Mapping[str, Any]) -> list[str]:
    read = d["members"] - len(d["pending"])
    lines = ["", f"Draw {d['draw_id']} ({d['plan']}): {d['members']} of {d['population_size']} cases drawn; "
                 f"{read} read for this draw", f"  {_rate_line(d)}"]
    if d.get("weighted") is not None:
        lines += _weighted_lines(d["weighted"])
    if "lot" in d:
        lot = d["lot"]
        lines.append(f"  lot: code letter {lot['code_letter']}, n={lot['sample_size']}, AQL {lot['aql']:g}, "
                     f"Ac {lot['accept']} Re {lot['reject']}; defectives {lot['defectives']} of {read} read: "
                     f"{lot['decision']}")
    if d["pending"]:
        lines.append(f"  awaiting review for this draw: {len(d['pending'])} ({_ids(d['pending'])})")
    if d.get("read_elsewhere"):
        lines.append(f"  of these, read for another draw only (not counted here): {len(d['read_elsewhere'])} "
                     f"({_ids(d['read_elsewhere'])})")
    return lines


def format_text(summary: Mapping[str, Any]) -> str:
    """Human-readable lines for the ``stats`` command."""
    o = summary["overall"]
    lines = ["Second reads", f"Rule: {summary.get('rule', 'readings as recorded')}", "",
             f"Overall (unweighted, each reader's latest reading): {_rate_line(o)}",
             f"Readers: {', '.join(o['readers']) or 'none'} ({o.get('readings', 0)} current readings)",
             *_agreement_lines(summary)]
    for d in summary["draws"]:
        lines += _draw_lines(d)
    lines += ["", summary["caution"]]
    return "\n".join(lines)


def describe_draw(body: Mapping[str, Any]) -> str:
    """Human-readable lines for the ``sample`` command: what was drawn and how to redraw it."""
    opts = ", ".join(f"{k}={v}" for k, v in sorted(body["options"].items())) or "none"
    filters = ", ".join(f"{k}={v}" for k, v in sorted(body["filters"].items())) or "none (every case)"
    lines = [f"Draw {body['draw_id']} ({body['plan']} plan, seed {body['seed']}, options {opts})",
             f"Filters: {filters}; population {body['population_size']} case(s); "
             f"{len(body['members'])} drawn"]
    for name, s in (body.get("strata") or {}).items():
        lines.append(f"  stratum {name}: {s['drawn']} of {s['size']} drawn")
    lot = body.get("lot")
    if lot:
        full = " (every case: sample size reaches the lot size)" if lot["full_inspection"] else ""
        lines.append(f"ISO 2859-1 level {lot['level']}: code letter {lot['code_letter']}, plan row "
                     f"{lot['plan_letter']}, n={lot['sample_size']}{full}, AQL {lot['aql']:g}, "
                     f"accept with at most {lot['accept']} disagreement(s), reject at {lot['reject']}")
    for m in body["members"]:
        stratum = f"  [{m['stratum']}]" if "stratum" in m else ""
        lines.append(f"  {m['case_id']}  seq {m['seq']}  p={m['inclusion_probability']:.4g}{stratum}")
    return "\n".join(lines)
