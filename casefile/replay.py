"""Replay a recorded case: the same input and model, the recorded settings, computed again and compared.

What "reproduces" means is in ``casefile.tolerances`` (and the README): the label equal, the confidence
and every map within tolerances, every check outcome equal. Bit-identity is not promised: float sums on a CPU can round differently
with another torch release, another CPU's vector instructions or another thread count (every case
records torch's version and thread count in ``software``, and the replay records both again).

Refusals come first, before the model is read by torch and before anything is written: the input
file's SHA-256 must be the recorded ``input.file_sha256`` and the model's weights file must have the
recorded ``model.digest`` (each one-line refusal names which differs and shows both digests). Then
the case is computed again with ``casefile.pipeline.explanation_for`` under the recorded settings, the
comparison is made, and one ``replay`` entry is appended that names the case entry by seq and hash.
"""

from __future__ import annotations

import os
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from casefile.errors import InputError, ModelError, ValidationError
from casefile.ledger import Entry, Ledger, utc_now
from casefile.software import software_versions
from casefile.tolerances import Tolerances


@dataclass(frozen=True)
class Replay:
    """The appended ``replay`` entry; ``reproduces`` and ``differences`` are read from its body."""

    entry: Entry

    @property
    def reproduces(self) -> bool:
        return bool(self.entry.body["reproduces"])

    @property
    def differences(self) -> list[str]:
        return list(self.entry.body["differences"])

    def lines(self) -> list[str]:
        b = self.entry.body
        head = (f"{b['case_id']}: {'reproduces' if self.reproduces else 'does not reproduce'} "
                f"(replay recorded as seq {self.entry.seq})")
        return [head, *(f"  {d}" for d in self.differences), *(f"  note: {n}" for n in b.get("notes", []))]


def check_digests(body: Mapping[str, Any], input_path: str | os.PathLike[str], model_path: str | os.PathLike[str],
                  card_path: str | os.PathLike[str]) -> tuple[str, str]:
    """Refuse, in one line, an input or a model whose SHA-256 differs from the record; return both digests.
    Nothing is decoded and torch reads nothing before this passes."""
    from casefile.models import read_card, sha256_file
    from casefile.models.loading import weights_file

    cid = body["case_id"]
    inp = Path(input_path)
    if not inp.is_file():
        raise InputError(f"{inp}: no such input file; nothing was replayed")
    got_input = sha256_file(inp)
    want_input = body["input"]["file_sha256"]
    if got_input != want_input:
        raise InputError(f"{inp.name}: input differs from case {cid}: SHA-256 {got_input}, recorded {want_input}; "
                         "nothing was replayed")
    card = read_card(card_path)
    weights, _ = weights_file(model_path, card, Path(card_path))
    got_model = sha256_file(weights)
    want_model = body["model"]["digest"]
    if got_model != want_model:
        raise ModelError(f"{weights.name}: model differs from case {cid}: SHA-256 {got_model}, recorded "
                         f"{want_model}; nothing was replayed")
    return got_input, got_model


def _map_from_blob(raw: bytes, shape: list[int]) -> np.ndarray:
    return np.frombuffer(raw, dtype="<f4").reshape(int(shape[0]), int(shape[1]))


def compare_map(method: str, recorded: np.ndarray | None, replayed: np.ndarray | None,
                tol: Tolerances) -> dict[str, Any]:
    """Spearman's rho and the largest absolute difference (also relative to the recorded map's largest
    absolute value) between a recorded map and the same map computed again."""
    out: dict[str, Any] = {"method": method, "spearman": None, "max_abs_diff": None, "max_abs_rel": None,
                           "within": False}
    if recorded is None or replayed is None:
        out["note"] = "not recorded" if recorded is None else "not computed by the replay"
        return out
    if recorded.shape != replayed.shape:
        out["note"] = f"shape {list(replayed.shape)} instead of the recorded {list(recorded.shape)}"
        return out
    a, b = recorded.astype(np.float64).ravel(), replayed.astype(np.float64).ravel()
    if not (np.all(np.isfinite(a)) and np.all(np.isfinite(b))):
        out["note"] = "a map holds values that are not finite"
        return out
    diff = float(np.max(np.abs(a - b))) if a.size else 0.0
    scale = float(np.max(np.abs(a))) if a.size else 0.0
    rel = diff / scale if scale > 0 else (0.0 if diff == 0 else float("inf"))
    if np.array_equal(a, b):
        rho = 1.0
    elif np.ptp(a) == 0 or np.ptp(b) == 0:
        rho = None  # a constant map has no ranks to correlate
    else:
        from scipy.stats import spearmanr

        rho = float(spearmanr(a, b).statistic)
    out.update({"spearman": rho, "max_abs_diff": diff, "max_abs_rel": rel if np.isfinite(rel) else None})
    close = rel <= tol.map_max_abs_rel
    out["within"] = bool(close and (rho is None and diff == 0 or rho is not None and rho >= tol.map_spearman_min))
    return out


def compare(body: Mapping[str, Any], exp: Any, blob: Any, tol: Tolerances) -> dict[str, Any]:
    """The comparison of a case body with an Explanation computed again: label, confidence, maps, checks,
    and one plain line per difference."""
    res = body["result"]
    diffs: list[str] = []
    label = {"recorded": res["label"], "replayed": exp.label, "equal": res["label"] == exp.label}
    if not label["equal"]:
        diffs.append(f"label: recorded {res['label']}, replayed {exp.label}")
    rc, nc = res.get("confidence"), float(exp.confidence)
    gap = abs(float(rc) - nc) if rc is not None else None
    conf = {"recorded": rc, "replayed": nc, "abs_diff": gap,
            "within": gap is not None and gap <= tol.confidence_abs}
    if not conf["within"]:
        diffs.append(f"confidence: recorded {rc}, replayed {nc:.6f} (difference {gap if gap is None else f'{gap:.2e}'}"
                     f", tolerance {tol.confidence_abs:g})")
    maps = []
    for m in body.get("maps") or []:
        rec = _map_from_blob(blob(m["raw_blob"]), m["shape"]) if m.get("raw_blob") else None
        c = compare_map(m["method"], rec, exp.maps.get(m["method"]), tol)
        maps.append(c)
        if not c["within"]:
            said = c.get("note") or (f"Spearman rho {c['spearman']:.6f}" if c["spearman"] is not None else
                                     "Spearman rho undefined") + f", largest difference {c['max_abs_diff']:.3g}"
            diffs.append(f"map {m['method']}: {said} (tolerance rho >= {tol.map_spearman_min:g}, largest "
                         f"difference <= {tol.map_max_abs_rel:g} of the map's largest value)")
    now = {c.name: c for c in exp.checks}
    checks = []
    for c in body.get("checks") or []:
        new = now.get(c["name"])
        row = {"name": c["name"], "recorded": c["outcome"], "replayed": new.outcome if new else None,
               "equal": new is not None and new.outcome == c["outcome"],
               "recorded_value": c.get("value"), "replayed_value": _finite(new.value) if new else None}
        checks.append(row)
        if not row["equal"]:
            diffs.append(f"check {c['name']}: recorded {c['outcome']}, replayed {row['replayed'] or 'not run'}")
    return {"label": label, "confidence": conf, "maps": maps, "checks": checks, "differences": diffs}


def _finite(v: Any) -> Any:
    if isinstance(v, float) and not np.isfinite(v):
        return None
    return v


def replay_case(ledger: Ledger, case_id: str, model_path: str | os.PathLike[str], card_path: str | os.PathLike[str],
                input_path: str | os.PathLike[str], *, tolerances: Tolerances | None = None,
                trusted_entry_points: Iterable[str] | None = None) -> Replay:
    """Compute the recorded case ``case_id`` again and append a ``replay`` entry (module docstring)."""
    from casefile.models import load_model

    entry = ledger.case(case_id).entry
    input_sha, model_sha = check_digests(entry.body, input_path, model_path, card_path)
    loaded = load_model(model_path, card_path, trusted_entry_points=trusted_entry_points)
    return replay_loaded(ledger, entry, loaded, input_path, tolerances or Tolerances(), input_sha)


def replay_loaded(ledger: Ledger, entry: Entry, loaded: Any, input_path: str | os.PathLike[str],
                  tol: Tolerances, input_sha: str) -> Replay:
    """The replay of the case ``entry`` with a model already loaded and both digests already checked."""
    from casefile.imaging import load
    from casefile.pipeline import explanation_for

    body = entry.body
    case_id = body["case_id"]
    settings = body["settings"]
    scan = load(input_path, frame=settings.get("frame"), window=loaded.card["windowing"],
                uid_policy=settings.get("uid_policy", "keep-uids"))
    target = body["result"]["label_index"] if body["result"].get("source") == "caller" else None
    try:
        exp = explanation_for(scan, loaded, settings, target=target)
    except (RuntimeError, ValueError) as exc:
        raise ValidationError(f"{case_id}: the replay could not be computed: {str(exc).strip().splitlines()[0]}"
                              ) from None
    result = compare(body, exp, ledger.blob, tol)
    card_equal = loaded.card_digest == body["model"].get("card_digest")
    notes = [] if card_equal else [f"card: SHA-256 {loaded.card_digest}, recorded {body['model'].get('card_digest')}; "
                                   "the settings recorded with the case were used"]
    recorded_sw = {k: str(v) for k, v in (body.get("software") or {}).items()}
    now_sw = software_versions()
    for key in ("torch", "torch_threads"):
        if recorded_sw.get(key) != now_sw.get(key):
            notes.append(f"{key}: {now_sw.get(key)} now, {recorded_sw.get(key, 'not recorded')} when recorded")
    out = {
        "case_id": case_id, "case_seq": entry.seq, "case_hash": entry.hash, "replayed_at": utc_now(),
        "reproduces": not result["differences"], "input_sha256": input_sha, "model_digest": loaded.digest,
        "card_digest": loaded.card_digest, "card_digest_equal": card_equal,
        "settings_digest": body["settings_digest"], "tolerances": tol.to_record(), **result,
        "notes": notes, "software": now_sw, "recorded_software": recorded_sw,
    }
    return Replay(ledger.append("replay", out))


@dataclass(frozen=True)
class ReplayBatch:
    """Every replay of a ``replay_all`` run, and the cases whose input was not in the folder."""

    replays: list[Replay]
    missing: list[str]


def replay_all(ledger: Ledger, folder: str | os.PathLike[str], model_path: str | os.PathLike[str],
               card_path: str | os.PathLike[str], *, since: str | None = None, until: str | None = None,
               tolerances: Tolerances | None = None,
               trusted_entry_points: Iterable[str] | None = None) -> ReplayBatch:
    """Replay every case recorded with this model (by digest), in the period when given, whose input
    (found by SHA-256) is in ``folder``; refused before anything is computed when no case matches."""
    from casefile.models import load_model, read_card, sha256_file
    from casefile.models.loading import weights_file
    from casefile.pipeline import iter_inputs

    where = Path(folder)
    if not where.is_dir():
        raise InputError(f"{where}: no such folder of inputs; nothing was replayed")
    weights, _ = weights_file(model_path, read_card(card_path), Path(card_path))
    digest = sha256_file(weights)
    rows = [r for r in ledger.cases(since=since, until=until) if r["model_digest"] == digest]
    if not rows:
        raise ModelError(f"{weights.name}: no case recorded with this model (SHA-256 {digest})"
                         f"{' in the period' if since or until else ''}; nothing was replayed")
    found = {sha256_file(p): p for p in iter_inputs([where])}
    loaded = load_model(model_path, card_path, trusted_entry_points=trusted_entry_points)
    tol = tolerances or Tolerances()
    replays = [replay_loaded(ledger, ledger.get(int(r["seq"])), loaded, found[r["file_sha256"]], tol, r["file_sha256"])
               for r in rows if r["file_sha256"] in found]
    return ReplayBatch(replays, [r["case_id"] for r in rows if r["file_sha256"] not in found])


def latest_replay(ledger: Ledger, case_id: str) -> Entry | None:
    """The newest ``replay`` entry of a case, or None (read through the replays query table)."""
    rows = [r for r in ledger.rows("replays") if r["case_id"] == case_id]
    return ledger.get(int(rows[-1]["seq"])) if rows else None


__all__ = ["Replay", "ReplayBatch", "Tolerances", "check_digests", "replay_all", "replay_loaded",
           "compare", "compare_map", "latest_replay", "replay_case"]
