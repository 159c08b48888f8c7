"""Labels people give (a reader, an amendment, an adjudicator) checked against the labels a case's model knows.

A label the model does not know is allowed only when the person says so (``--new-label``); it is then
recorded as such (``"label_is_new": true``), so that agreement figures and audits can tell a typo from
a finding outside the model's vocabulary. Both refusals are one line, before anything is written.
"""

from __future__ import annotations

from collections.abc import Sequence

from casefile.errors import ValidationError


def check_label(what: str, label: str, known: Sequence[str], *, new_label: bool = False) -> bool:
    """Return True when ``label`` is new (allowed by ``new_label``), False when the model knows it.

    ``what`` names the record in the message, e.g. ``"review of cf-1a2b..."``."""
    names = ", ".join(known)
    if label in known:
        if new_label:
            raise ValidationError(f"{what}: --new-label given but {label!r} is one of the model's labels ({names})")
        return False
    if not new_label:
        raise ValidationError(f"{what}: label {label!r} is not one of the model's labels ({names}); "
                              "pass --new-label to record a label the model does not know")
    return True
