"""The caution texts printed on every case sheet, and reused by the README and the review page."""

from __future__ import annotations

CAUTION_TITLE = "Read before use"

# Each line is a whole sentence so that it can be printed, wrapped or searched on its own.
CAUTION_INFLUENCE = (
    "An explanation map shows which parts of the image influenced the model's output; "
    "it does not show whether the model is right."
)
CAUTION_NOT_VERDICT = "This sheet is not a diagnosis and not an inspection verdict."
CAUTION_DECISIONS = (
    "Decisions rest with qualified staff, under local clinical, regulatory and inspection practice."
)
CAUTION_CHECKS = (
    "A passed check means only that the explanation behaved as expected in that test; "
    "a warning or failure means the map should not be relied on for this case."
)

CAUTIONS: tuple[str, ...] = (CAUTION_INFLUENCE, CAUTION_NOT_VERDICT, CAUTION_DECISIONS, CAUTION_CHECKS)
CAUTION_TEXT = " ".join(CAUTIONS)
