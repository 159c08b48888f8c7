"""Second reads: sampling plans, reader verdicts, adjudications and agreement statistics over the ledger.

One library function per command: ``casefile sample`` -> ``draw`` (print ``describe_draw(entry.body)``
or the body as JSON), ``casefile review`` -> ``record_review``, ``casefile adjudicate`` ->
``record_adjudication``, ``casefile stats`` -> ``summarise`` (print ``format_text(summary)`` or the
summary as JSON).
"""

from casefile.review.agreement import (
    cohen_kappa,
    confusion_table,
    fleiss_kappa,
    horvitz_thompson,
    mover_sum,
    wilson_interval,
)
from casefile.review.lot import code_letter, lot_decision, single_normal_plan
from casefile.review.plans import DEFAULT_MINIMUM, draw_plan
from casefile.review.readings import record_adjudication, record_review
from casefile.review.stats import summarise, summarise_data
from casefile.review.store import draw, population, redraw
from casefile.review.text import describe_draw, format_text

__all__ = ["DEFAULT_MINIMUM", "code_letter", "cohen_kappa", "confusion_table", "describe_draw", "draw",
           "draw_plan", "fleiss_kappa", "format_text", "horvitz_thompson", "lot_decision", "mover_sum",
           "population", "record_adjudication", "record_review", "redraw", "single_normal_plan", "summarise",
           "summarise_data", "wilson_interval"]
