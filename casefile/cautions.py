"""The caution texts: on every case sheet, in every case record, in the statistics and the review page.

They live below every room that prints them (record, sheet, review, demo, server), so no room reaches
into another for its words. The README says the same in its own paragraph."""

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

# Second-read figures (the stats command, the sheet's review panel, reports and the review page).
AGREEMENT_CAUTION = (
    "Agreement figures compare the model with human readers; they are not a diagnosis or an "
    "inspection verdict. Decisions rest with qualified staff under local clinical, regulatory and "
    "inspection practice."
)

# Model identity (the record's model.notes and the sheet beside the model digest).
WEIGHTS_NOT_PINNED = "weights not pinned by the card"
WEIGHTS_PINNED = "weights match the card's SHA-256"

# The review page (casefile serve): the same cautions, said of a page rather than a sheet.
CAUTION_PAGE_NOT_VERDICT = "This page is not a diagnosis and not an inspection verdict."
PAGE_CAUTIONS: tuple[str, ...] = (CAUTION_INFLUENCE, CAUTION_PAGE_NOT_VERDICT, CAUTION_DECISIONS, CAUTION_CHECKS)
