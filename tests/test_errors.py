"""The one-line form of a library's exception message shown to users.

Outside source: none applies; these are the rules of casefile.errors.one_line (one line, no trace),
checked on exceptions as Python and Pillow raise them.
"""

import pytest

from casefile.errors import one_line


def test_first_non_empty_line_cut_to_the_limit():
    assert one_line(ValueError("\n  cannot identify image file 'x.png'\n  more detail\n")) == \
        "cannot identify image file 'x.png'"
    cut = one_line(RuntimeError("a" * 300), limit=20)
    assert len(cut) == 20 and cut.endswith("…")


def test_last_line_and_empty_message():
    assert one_line(RuntimeError("Traceback of the model:\n  File m.py\nsize mismatch"), last=True) == "size mismatch"
    assert one_line(KeyError()) == "KeyError" and one_line(OSError("   ")) == "OSError"


@pytest.mark.parametrize("limit", [1, 5, 160])
def test_never_longer_than_the_limit(limit):
    assert len(one_line(ValueError("x" * 500), limit=limit)) <= limit
