"""Lot acceptance sampling: ISO 2859-1 code letters and single sampling plans for normal inspection.

The tables are written here as data. Source: ISO 2859-1:1999 Table 1 (sample size code letters) and
Table 2-A (single sampling plans for normal inspection, master table); the same values are printed in
the public-domain MIL-STD-105E (10 May 1989) as Table I and Table II-A.

How a plan is found (ISO 2859-1 clause 10, MIL-STD-105E 4.9):
1. lot size and inspection level (I, II or III) give the code letter (Table 1);
2. the code letter gives a row of Table 2-A and a sample size;
3. the AQL gives a column; the cell holds Ac (accept) and Re (reject) numbers, or an arrow:
   - a down arrow means "use the first sampling plan below the arrow": the rows below are searched
     until a cell with Ac/Re is found, and that row's sample size is used instead;
   - an up arrow means "use the first sampling plan above the arrow", searching upwards the same way.
   The code letter named by Table 1 is kept as ``code_letter``; the row actually used is
   ``plan_letter`` and its sample size is ``sample_size``;
4. if the sample size equals or exceeds the lot size, every item is inspected (100 %); the Ac/Re of
   the plan are kept and the decision rule is unchanged.

Only AQLs up to 10 are offered: in Table 2-A the columns above 10 are for nonconformities per hundred
units, whereas a second read counts nonconforming items (a reader disagreement), so those columns do
not apply here.
"""

from __future__ import annotations

from typing import Any

from casefile.errors import ValidationError

LEVELS = ("I", "II", "III")

# ISO 2859-1 Table 1 / MIL-STD-105E Table I, general inspection levels I, II, III.
# (upper bound of lot size, letter at level I, level II, level III); the last row is "500 001 and over".
TABLE_1: tuple[tuple[int | None, str, str, str], ...] = (
    (8, "A", "A", "B"),
    (15, "A", "B", "C"),
    (25, "B", "C", "D"),
    (50, "C", "D", "E"),
    (90, "C", "E", "F"),
    (150, "D", "F", "G"),
    (280, "E", "G", "H"),
    (500, "F", "H", "J"),
    (1200, "G", "J", "K"),
    (3200, "H", "K", "L"),
    (10000, "J", "L", "M"),
    (35000, "K", "M", "N"),
    (150000, "L", "N", "P"),
    (500000, "M", "P", "Q"),
    (None, "N", "Q", "R"),
)

# ISO 2859-1 Table 2-A / MIL-STD-105E Table II-A: sample size per code letter.
LETTERS = "ABCDEFGHJKLMNPQR"
SAMPLE_SIZES: dict[str, int] = dict(
    zip(LETTERS, (2, 3, 5, 8, 13, 20, 32, 50, 80, 125, 200, 315, 500, 800, 1250, 2000), strict=True)
)

# The AQL columns of Table 2-A offered here (percent nonconforming), in table order.
AQLS: tuple[float, ...] = (0.010, 0.015, 0.025, 0.040, 0.065, 0.10, 0.15, 0.25, 0.40, 0.65, 1.0, 1.5,
                           2.5, 4.0, 6.5, 10.0)

UP, DOWN = "up", "down"


# Reading any row of Table 2-A from left to right, the cells run: down arrows, then 0/1, up arrow, 1/2,
# 2/3, 3/4, 5/6, 7/8, 10/11, 14/15, 21/22, then up arrows (for the AQLs up to 10 used here). Each row
# starts this run one column further left than the row above it.
RUN: tuple[Any, ...] = ((0, 1), UP, (1, 2), (2, 3), (3, 4), (5, 6), (7, 8), (10, 11), (14, 15), (21, 22))


def _build_table_2a() -> dict[tuple[str, float], Any]:
    table: dict[tuple[str, float], Any] = {}
    for row, letter in enumerate(LETTERS):
        # Row A has its 0/1 cell under AQL 10 (column 15); row R has it under AQL 0.010 (column 0).
        start = len(LETTERS) - 1 - row
        for col, aql in enumerate(AQLS):
            pos = col - start
            if pos < 0:
                table[(letter, aql)] = DOWN
            elif pos < len(RUN):
                table[(letter, aql)] = RUN[pos]
            else:
                table[(letter, aql)] = UP
    return table


TABLE_2A: dict[tuple[str, float], Any] = _build_table_2a()


def _aql_column(aql: float) -> float:
    for a in AQLS:
        if abs(a - float(aql)) < 1e-9:
            return a
    offered = ", ".join(f"{a:g}" for a in AQLS)
    raise ValidationError(f"lot plan: AQL {aql!r} is not a column of ISO 2859-1 Table 2-A offered here ({offered})")


def code_letter(lot_size: int, level: str = "II") -> str:
    """Return the sample size code letter of ISO 2859-1 Table 1 for a lot size and general level."""
    if level not in LEVELS:
        raise ValidationError(f"lot plan: inspection level {level!r} is not one of I, II, III")
    if isinstance(lot_size, bool) or not isinstance(lot_size, int) or lot_size < 2:
        raise ValidationError(f"lot plan: lot size {lot_size!r} is below 2, the smallest lot in ISO 2859-1 Table 1")
    column = LEVELS.index(level) + 1
    for row in TABLE_1:
        upper = row[0]
        if upper is None or lot_size <= upper:
            return str(row[column])
    raise AssertionError("unreachable: the last row of Table 1 is open-ended")


def plan_for_letter(letter: str, aql: float) -> tuple[str, int, int]:
    """Follow the arrows of Table 2-A from a code letter: return (plan letter, Ac, Re)."""
    column = _aql_column(aql)
    row = LETTERS.index(letter)
    while True:
        cell = TABLE_2A[(LETTERS[row], column)]
        if cell == DOWN:
            row += 1
        elif cell == UP:
            row -= 1
        else:
            return LETTERS[row], int(cell[0]), int(cell[1])


def single_normal_plan(lot_size: int, aql: float, level: str = "II") -> dict[str, Any]:
    """The single sampling plan for normal inspection: plain data for a draw's ``lot`` field."""
    letter = code_letter(lot_size, level)
    used, accept, reject = plan_for_letter(letter, aql)
    n = SAMPLE_SIZES[used]
    full = n >= lot_size
    return {
        "lot_size": lot_size,
        "code_letter": letter,
        "plan_letter": used,
        "sample_size": lot_size if full else n,
        "table_sample_size": n,
        "full_inspection": full,
        "accept": accept,
        "reject": reject,
        "aql": _aql_column(aql),
        "level": level,
    }


def lot_decision(defectives: int, reviewed: int, plan: dict[str, Any]) -> str:
    """'accept' when defectives <= Ac, 'reject' when >= Re, else 'pending' until every member is read.

    A reject can be called early (Re reached) and so can an accept when even the unread members could
    not reach Re; otherwise the decision waits for the remaining reads.
    """
    if defectives >= plan["reject"]:
        return "reject"
    outstanding = plan["sample_size"] - reviewed
    if defectives + max(outstanding, 0) <= plan["accept"]:
        return "accept"
    return "pending"
