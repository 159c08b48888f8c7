"""Readers' verdicts (``review`` entries) and adjudications, with the rules for which reading counts.

Rules for a review (decided here and kept by ``record_review``, every refusal before anything is written):
- the case id must name a recorded case; the reader id must not be blank; the verdict is one of
  ``agree``, ``disagree``, ``unsure``;
- ``label`` (the reader's own label) is optional. It must be one of the model's labels (the case's
  ``model.labels``) unless ``new_label`` is given, which is recorded as ``"label_is_new": true``. With
  ``agree`` it must equal the model's label; with ``disagree`` it must differ from it. A ``disagree``
  without a label still counts as a disagreement but cannot enter the confusion table or kappa;
- a reading belongs to one draw: ``draw_id`` given (the case must be one of its members), else the
  latest draw that has the case among its members, else none;
- a reader reads a case once per draw. A second review by the same reader of the same case for the
  same draw is refused unless it names the reading it corrects (``amends``, the seq of that reader's
  current reading for that draw); the correction stays in the draw of the reading it corrects, and
  both stay visible. A reader may only amend their own reading;
- the *current* reading of (case, reader, draw) is the latest in its chain of corrections.

Which readings count where:
- in a draw's figures, the current readings recorded against that draw (``draw_id`` equal); readings of
  its members recorded for other draws, or for none, are counted apart (``read_elsewhere``) and never
  enter its rate;
- in the overall figures and in reader agreement, each reader's latest current reading of a case, for
  whichever draw.

Readers disagree with each other on a case when, among their current readings, two give different
labels (the reader's label: the model's for ``agree``, the given one for ``disagree``), or one agrees
with the model and another disagrees. Only then may an ``adjudication`` be recorded.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any, Literal

from casefile.errors import LedgerError, ValidationError
from casefile.labels import check_label
from casefile.ledger import CaseHistory, Entry, Ledger, utc_now

Verdict = Literal["agree", "disagree", "unsure"]
VERDICTS = ("agree", "disagree", "unsure")
Key = tuple[str, str, str | None]  # (case_id, reader, draw_id)


def reader_label(review: Mapping[str, Any], model_label: str) -> str | None:
    """The label a reader gave: the model's for ``agree``, the given one for ``disagree``; else None."""
    if review["verdict"] == "agree":
        return model_label
    if review["verdict"] == "disagree":
        return review.get("label")
    return None


def _key(body: Mapping[str, Any]) -> Key:
    return str(body["case_id"]), str(body["reader"]), body.get("draw_id")


def current_readings(reviews: Iterable[Mapping[str, Any]]) -> dict[Key, dict[str, Any]]:
    """The current reading per (case, reader, draw) from review bodies in seq order.

    A body's ``seq`` (added by the caller from its entry) lets a correction that crossed draws (as older
    releases recorded them) retire the reading it amends; without it, position order stands in."""
    out: dict[Key, dict[str, Any]] = {}
    seen: dict[int, Key] = {}
    for pos, body in enumerate(reviews, start=1):
        b = dict(body)
        b.setdefault("seq", pos)
        key = _key(b)
        amended = b.get("amends_seq")
        old = seen.get(amended) if isinstance(amended, int) else None
        if old is not None and old != key and out.get(old, {}).get("seq") == amended:
            del out[old]
        out[key] = b
        seen[int(b["seq"])] = key
    return out


def latest_by_reader(readings: Mapping[Key, Mapping[str, Any]]) -> dict[str, dict[str, dict[str, Any]]]:
    """{case_id: {reader: body}}: each reader's latest current reading of a case, for any draw."""
    out: dict[str, dict[str, dict[str, Any]]] = {}
    for (case_id, reader, _), body in sorted(readings.items(), key=lambda kv: kv[1]["seq"]):
        out.setdefault(case_id, {})[reader] = dict(body)
    return out


def for_draw(readings: Mapping[Key, Mapping[str, Any]], draw_id: str) -> dict[str, dict[str, dict[str, Any]]]:
    """{case_id: {reader: body}}: the current readings recorded against ``draw_id``."""
    out: dict[str, dict[str, dict[str, Any]]] = {}
    for (case_id, reader, d), body in readings.items():
        if d == draw_id:
            out.setdefault(case_id, {})[reader] = dict(body)
    return out


def current_reviews(reviews: list[Mapping[str, Any]]) -> dict[str, dict[str, dict[str, Any]]]:
    """{case_id: {reader: body}}, each reader's latest current reading (review bodies in seq order)."""
    return latest_by_reader(current_readings(reviews))


def readers_disagree(readers: Mapping[str, Mapping[str, Any]], model_label: str) -> bool:
    """True when two of these current readings of one case conflict (see the module docstring)."""
    labels = {lab for r in readers.values() if (lab := reader_label(r, model_label)) is not None}
    verdicts = {r["verdict"] for r in readers.values()}
    return len(labels) > 1 or {"agree", "disagree"} <= verdicts


# ------------------------------------------------------------------ writing


def _history(ledger: Ledger, case_id: str, what: str) -> CaseHistory:
    try:
        return ledger.case(case_id)
    except LedgerError:
        raise ValidationError(f"{what}: no case with this id in the ledger") from None


def _person(value: Any, what: str, role: str) -> str:
    if not isinstance(value, str) or not value.strip():
        raise ValidationError(f"{what}: {role} id is empty; give who {'read' if role == 'reader' else 'decided'} "
                              "the case")
    return value.strip()


def _draw_members(ledger: Ledger, draw_id: str) -> set[str] | None:
    for row in ledger.rows("draws"):
        if row["draw_id"] == draw_id:
            return {m["case_id"] for m in ledger.get(int(row["seq"])).body["members"]}
    return None


def _latest_draw_with(ledger: Ledger, case_id: str) -> str | None:
    found = None
    for e in ledger.entries("draw"):
        if any(m["case_id"] == case_id for m in e.body["members"]):
            found = e.body["draw_id"]
    return found


def _review_label(what: str, label: str | None, verdict: str, body: Mapping[str, Any],
                  new_label: bool) -> bool:
    """Check the reader's label; return whether it is new to the model."""
    if label is None:
        if new_label:
            raise ValidationError(f"{what}: --new-label given without a label")
        return False
    model_label = body["result"]["label"]
    if verdict == "agree" and label != model_label:
        raise ValidationError(f"{what}: verdict agree but label {label!r} differs from the model's "
                              f"{model_label!r}; use disagree")
    if verdict == "disagree" and label == model_label:
        raise ValidationError(f"{what}: verdict disagree but label {label!r} is the model's own")
    return check_label(what, label, body["model"]["labels"], new_label=new_label)


def _reading_draw(ledger: Ledger, case_id: str, what: str, draw_id: str | None,
                  amended: Entry | None) -> str | None:
    if amended is not None:
        own = amended.body.get("draw_id")
        if draw_id is not None and draw_id != own:
            raise ValidationError(f"{what}: seq {amended.seq} was read for draw {own or 'none'}; a correction "
                                  "stays in the draw of the reading it corrects")
        return own
    if draw_id is not None:
        members = _draw_members(ledger, draw_id)
        if members is None:
            raise ValidationError(f"{what}: no draw {draw_id!r} in the ledger")
        if case_id not in members:
            raise ValidationError(f"{what}: the case is not a member of draw {draw_id}")
        return draw_id
    return _latest_draw_with(ledger, case_id)


def _amended(history: CaseHistory, what: str, reader: str, amends: int) -> Entry:
    target = next((r for r in history.reviews if r.seq == amends), None)
    if target is None:
        raise ValidationError(f"{what}: seq {amends} is not a review of this case")
    if target.body["reader"] != reader:
        raise ValidationError(f"{what}: seq {amends} is {target.body['reader']!r}'s review; "
                              "a reader may only amend their own")
    current = current_readings({**r.body, "seq": r.seq} for r in history.reviews).get(_key(target.body))
    if current is not None and current["seq"] != amends:
        raise ValidationError(f"{what}: seq {amends} was already corrected by seq {current['seq']}; "
                              f"amend that one (--amends {current['seq']})")
    return target


def record_review(ledger: Ledger, case_id: str, *, reader: str, verdict: str, label: str | None = None,
                  note: str | None = None, amends: int | None = None, draw_id: str | None = None,
                  new_label: bool = False) -> Entry:
    """Append a reader's verdict on a case as a ``review`` entry (rules in this module's docstring).

    The rules are checked under the chain-head lock, in the transaction that appends: two processes
    recording the same reader's reading of a case for one draw at once cannot both pass."""
    return ledger.transaction(lambda conn: ledger.append_in(conn, "review", _review_body(
        ledger, case_id, reader=reader, verdict=verdict, label=label, note=note, amends=amends, draw_id=draw_id,
        new_label=new_label)))


def _review_body(ledger: Ledger, case_id: str, *, reader: str, verdict: str, label: str | None,
                 note: str | None, amends: int | None, draw_id: str | None, new_label: bool) -> dict[str, Any]:
    what = f"review of {case_id}"
    reader = _person(reader, what, "reader")
    if verdict not in VERDICTS:
        raise ValidationError(f"{what}: verdict {verdict!r} is not one of {', '.join(VERDICTS)}")
    history = _history(ledger, case_id, what)
    if label is not None:
        label = label.strip()
        if not label:
            raise ValidationError(f"{what}: label is blank; leave it out or give the reader's label")
    is_new = _review_label(what, label, verdict, history.entry.body, new_label)
    target = _amended(history, what, reader, amends) if amends is not None else None
    draw_id = _reading_draw(ledger, case_id, what, draw_id, target)
    if target is None:
        current = current_readings({**r.body, "seq": r.seq} for r in history.reviews)
        earlier = current.get((case_id, reader, draw_id))
        if earlier is not None:
            where = f"draw {draw_id}" if draw_id else "no draw"
            raise ValidationError(f"{what}: {reader} already read this case for {where} (seq {earlier['seq']}); "
                                  f"to correct that reading pass --amends {earlier['seq']}")
    body: dict[str, Any] = {"case_id": case_id, "case_seq": history.entry.seq, "reader": reader,
                            "verdict": verdict, "reviewed_at": utc_now()}
    if label is not None:
        body["label"] = label
    if is_new:
        body["label_is_new"] = True
    if note is not None:
        body["note"] = note
    if amends is not None:
        body["amends_seq"] = amends
    if draw_id is not None:
        body["draw_id"] = draw_id
    return body


def record_adjudication(ledger: Ledger, case_id: str, *, adjudicator: str, label: str, reason: str,
                        new_label: bool = False, draw_id: str | None = None) -> Entry:
    """Append an ``adjudication``: refused unless the case's readers currently disagree with each other
    (within ``draw_id`` when given, else over each reader's latest reading) and the adjudicator is not one
    of them."""
    # checked under the chain-head lock, so the readings it names are the current ones when it is written
    return ledger.transaction(lambda conn: ledger.append_in(conn, "adjudication", _adjudication_body(
        ledger, case_id, adjudicator=adjudicator, label=label, reason=reason, new_label=new_label,
        draw_id=draw_id)))


def _adjudication_body(ledger: Ledger, case_id: str, *, adjudicator: str, label: str, reason: str,
                       new_label: bool, draw_id: str | None) -> dict[str, Any]:
    what = f"adjudication of {case_id}"
    adjudicator = _person(adjudicator, what, "adjudicator")
    if not isinstance(reason, str) or not reason.strip():
        raise ValidationError(f"{what}: reason is empty; say why this label was decided")
    if not isinstance(label, str) or not label.strip():
        raise ValidationError(f"{what}: label is empty; give the label decided")
    history = _history(ledger, case_id, what)
    body = history.entry.body
    is_new = check_label(what, label.strip(), body["model"]["labels"], new_label=new_label)
    readings = current_readings({**r.body, "seq": r.seq} for r in history.reviews)
    if draw_id is not None:
        readers = for_draw(readings, draw_id).get(case_id, {})
    else:
        readers = latest_by_reader(readings).get(case_id, {})
    said = ", ".join(f"{r} {b['verdict']}" for r, b in sorted(readers.items())) or "none"
    if not readers_disagree(readers, body["result"]["label"]):
        raise ValidationError(f"{what}: the readers do not disagree with each other (current readings: {said}); "
                              "there is nothing to adjudicate")
    if adjudicator in readers:
        raise ValidationError(f"{what}: {adjudicator} is one of the readers in disagreement; "
                              "another person adjudicates")
    out: dict[str, Any] = {"case_id": case_id, "case_seq": history.entry.seq, "adjudicator": adjudicator,
                           "label": label.strip(), "reason": reason.strip(),
                           "readings": sorted(int(b["seq"]) for b in readers.values()),
                           "adjudicated_at": utc_now()}
    if is_new:
        out["label_is_new"] = True
    if draw_id is not None:
        out["draw_id"] = draw_id
    return out


__all__ = ["VERDICTS", "current_readings", "current_reviews", "for_draw", "latest_by_reader", "reader_label",
           "readers_disagree", "record_adjudication", "record_review"]
