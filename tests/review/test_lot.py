"""ISO 2859-1 / MIL-STD-105E tables as coded in casefile.review.lot, against values from the standard."""

import pytest

from casefile.errors import ValidationError
from casefile.review.lot import SAMPLE_SIZES, code_letter, lot_decision, plan_for_letter, single_normal_plan

# ISO 2859-1 Table 1 = MIL-STD-105E Table I, general inspection level II, every lot-size row
# (lower bound, upper bound, letter). From memory of the public-domain MIL-STD-105E; rows 2..Q for
# levels II agree with the level II summary table derived from MIL-STD-105E Table I published by the
# US National Institute of Building Sciences (nibs.org, "TABLE 1-A").
TABLE_I_LEVEL_II = [
    (2, 8, "A"), (9, 15, "B"), (16, 25, "C"), (26, 50, "D"), (51, 90, "E"), (91, 150, "F"),
    (151, 280, "G"), (281, 500, "H"), (501, 1200, "J"), (1201, 3200, "K"), (3201, 10000, "L"),
    (10001, 35000, "M"), (35001, 150000, "N"), (150001, 500000, "P"), (500001, 2_000_000, "Q"),
]

# MIL-STD-105E Table I, spot rows at levels I and III (from memory).
TABLE_I_SPOT = [
    (5, "I", "A"), (5, "III", "B"), (20, "I", "B"), (20, "III", "D"), (100, "I", "D"), (100, "III", "G"),
    (400, "I", "F"), (400, "III", "J"), (1000, "I", "G"), (1000, "III", "K"), (5000, "I", "J"),
    (5000, "III", "M"), (200000, "I", "M"), (200000, "III", "Q"), (600000, "I", "N"), (600000, "III", "R"),
]

# MIL-STD-105E Table II-A (= ISO 2859-1 Table 2-A): sample size per code letter.
SAMPLE_SIZE = {"A": 2, "B": 3, "C": 5, "D": 8, "E": 13, "F": 20, "G": 32, "H": 50, "J": 80, "K": 125,
               "L": 200, "M": 315, "N": 500, "P": 800, "Q": 1250, "R": 2000}

# MIL-STD-105E Table II-A cells for four AQL columns, row A..R: (Ac, Re), "v" = use first plan below the
# arrow, "^" = use first plan above. From memory of the standard; the Ac/Re numbers of rows F..Q agree
# with the nibs.org level II summary of MIL-STD-105E quoted above.
V, U = "v", "^"
TABLE_II_A = {
    0.65: [V, V, V, V, V, V, (0, 1), U, (1, 2), (2, 3), (3, 4), (5, 6), (7, 8), (10, 11), (14, 15), (21, 22)],
    1.0: [V, V, V, V, V, (0, 1), U, (1, 2), (2, 3), (3, 4), (5, 6), (7, 8), (10, 11), (14, 15), (21, 22), U],
    2.5: [V, V, V, (0, 1), U, (1, 2), (2, 3), (3, 4), (5, 6), (7, 8), (10, 11), (14, 15), (21, 22), U, U, U],
    4.0: [V, V, (0, 1), U, (1, 2), (2, 3), (3, 4), (5, 6), (7, 8), (10, 11), (14, 15), (21, 22), U, U, U, U],
}
LETTERS = "ABCDEFGHJKLMNPQR"


@pytest.mark.parametrize(("low", "high", "letter"), TABLE_I_LEVEL_II)
def test_code_letter_every_level_ii_row(low, high, letter):
    assert code_letter(low, "II") == letter
    assert code_letter(high, "II") == letter
    assert code_letter((low + high) // 2, "II") == letter


@pytest.mark.parametrize(("lot", "level", "letter"), TABLE_I_SPOT)
def test_code_letter_spot_rows_levels_i_and_iii(lot, level, letter):
    assert code_letter(lot, level) == letter


def _resolve(aql, letter):
    """Follow the arrows of the hand-written expected column, as the standard instructs."""
    col, row = TABLE_II_A[aql], LETTERS.index(letter)
    while col[row] in (V, U):
        row += 1 if col[row] == V else -1
    return LETTERS[row], col[row]


@pytest.mark.parametrize("aql", sorted(TABLE_II_A))
@pytest.mark.parametrize("letter", list(LETTERS))
def test_ac_re_against_table_ii_a_including_arrows(aql, letter):
    used, (ac, re) = _resolve(aql, letter)
    assert plan_for_letter(letter, aql) == (used, ac, re)


def test_known_worked_plans():
    # Textbook examples (from memory, common practice): lot 1000 level II AQL 2.5 -> J, n=80, Ac 5 Re 6;
    # lot 3000 level II AQL 2.5 -> K, n=125, Ac 7 Re 8.
    p = single_normal_plan(1000, 2.5, "II")
    assert (p["code_letter"], p["sample_size"], p["accept"], p["reject"]) == ("J", 80, 5, 6)
    p = single_normal_plan(3000, 2.5, "II")
    assert (p["code_letter"], p["sample_size"], p["accept"], p["reject"]) == ("K", 125, 7, 8)


def test_arrow_changes_sample_size():
    # lot 150 level II -> F (n=20); at AQL 0.65 the F cell is a down arrow -> G: n=32, Ac 0 Re 1
    # (MIL-STD-105E Table II-A, from memory).
    p = single_normal_plan(150, 0.65, "II")
    assert (p["code_letter"], p["plan_letter"], p["sample_size"], p["accept"], p["reject"]) == ("F", "G", 32, 0, 1)
    # lot 280 level II -> G (n=32); at AQL 1.0 the G cell is an up arrow -> F: n=20, Ac 0 Re 1.
    p = single_normal_plan(280, 1.0, "II")
    assert (p["code_letter"], p["plan_letter"], p["sample_size"], p["accept"]) == ("G", "F", 20, 0)


def test_full_inspection_when_sample_exceeds_lot():
    # MIL-STD-105E Table II-A note: "If sample size equals or exceeds lot or batch size, do 100 percent
    # inspection." Lot 10, level II -> B; AQL 0.65 arrows down to G (n=32) >= 10.
    p = single_normal_plan(10, 0.65, "II")
    assert p["full_inspection"] is True
    assert p["sample_size"] == 10
    assert p["table_sample_size"] == SAMPLE_SIZE["G"]


def test_sample_sizes_per_letter():
    for letter, n in SAMPLE_SIZE.items():
        # the AQL column whose 0/1 cell sits on this letter's row has no arrow to follow
        col = [0.010, 0.015, 0.025, 0.040, 0.065, 0.10, 0.15, 0.25, 0.40, 0.65, 1.0, 1.5, 2.5, 4.0, 6.5, 10.0]
        aql = col[15 - LETTERS.index(letter)]
        assert plan_for_letter(letter, aql) == (letter, 0, 1)
        assert SAMPLE_SIZES[letter] == n
    lots = {"A": 5, "B": 12, "C": 20, "D": 40, "E": 70, "F": 120, "G": 200, "H": 400, "J": 1000,
            "K": 2000, "L": 5000, "M": 20000, "N": 100000, "P": 300000, "Q": 800000}
    for letter, lot in lots.items():
        p = single_normal_plan(lot, 10.0 if letter == "A" else 0.010, "II")
        assert p["code_letter"] == letter
    assert single_normal_plan(800000, 0.010, "III")["sample_size"] == SAMPLE_SIZE["R"]


def test_lot_decision_rule():
    # Accept when defectives <= Ac, reject when defectives >= Re (ISO 2859-1 clause 11.1, from memory).
    plan = single_normal_plan(1000, 2.5, "II")  # n=80, Ac 5, Re 6
    assert lot_decision(5, 80, plan) == "accept"
    assert lot_decision(6, 80, plan) == "reject"
    assert lot_decision(6, 30, plan) == "reject"  # Re reached before the sample is finished
    assert lot_decision(5, 79, plan) == "pending"  # one unread could reach Re
    assert lot_decision(0, 76, plan) == "accept"  # 4 unread cannot reach Re


@pytest.mark.parametrize(("lot", "aql", "level"), [(1, 1.0, "II"), (100, 15, "II"), (100, 1.0, "IV"), (100, 0.3, "II")])
def test_refuses_what_the_tables_do_not_cover(lot, aql, level):
    with pytest.raises(ValidationError, match="lot plan"):
        single_normal_plan(lot, aql, level)
