"""Second reads: sampling plans, reader verdicts and agreement statistics over the ledger.

One library function per command: ``casefile sample`` -> ``draw`` (print ``describe_draw(entry.body)``
or the body as JSON), ``casefile review`` -> ``record_review``, ``casefile stats`` -> ``summarise``
(print ``format_text(summary)`` or the summary as JSON).
"""

from casefile.review.agreement import cohen_kappa, confusion_table, horvitz_thompson, wilson_interval
from casefile.review.lot import code_letter, lot_decision, single_normal_plan
from casefile.review.plans import draw_plan
from casefile.review.stats import describe_draw, format_text, summarise, summarise_data
from casefile.review.store import draw, population, record_review, redraw

__all__ = ["code_letter", "cohen_kappa", "confusion_table", "describe_draw", "draw", "draw_plan", "format_text",
           "horvitz_thompson", "lot_decision", "population", "record_review", "redraw", "single_normal_plan",
           "summarise", "summarise_data", "wilson_interval"]
