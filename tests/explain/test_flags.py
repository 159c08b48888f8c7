"""explain.run decides flags and notes by the policy in its settings, and records the policy it used.

Outside sources: none; the policy is our own rule (casefile.flags), and these tests check that run()
applies what the settings say, on the small trained models of conftest.py.
"""

from __future__ import annotations

import pytest

from casefile.errors import ExplainError
from casefile.explain import run
from casefile.flags import DEFAULT_FLAG_POLICY, flags

from .conftest import ROI

SMALL = {"occlusion_patch": 8, "occlusion_stride": 4}


def _run(net, x, **settings):
    return run(net, x, labels=["lying", "upright"], layer="features.5", settings={**SMALL, **settings}, roi=ROI)


def test_every_check_says_whether_it_flags(marker_net, test_picture):
    e = _run(marker_net, test_picture)
    assert all(isinstance(c.flags, bool) for c in e.checks)
    assert e.flags == [c.name for c in e.checks if c.flags]
    assert e.flagged == bool(e.flags)
    assert all(c.flags == flags(c.name, c.outcome) for c in e.checks)
    rec = e.to_record()
    assert rec["flagged"] == e.flagged and rec["flags"] == e.flags
    assert all("flags" in c for c in rec["checks"])
    assert rec["settings"]["flag_policy"] == DEFAULT_FLAG_POLICY  # the policy used is kept


def test_a_policy_override_turns_flags_into_notes(marker_net, test_picture):
    quiet = dict.fromkeys(DEFAULT_FLAG_POLICY, "note")
    e = _run(marker_net, test_picture, flag_policy=quiet)
    assert e.flags == [] and not e.flagged and all(c.flags is False for c in e.checks)
    loud = _run(marker_net, test_picture, flag_policy={"method_agreement": "flag-on-warn"})
    agreement = next(c for c in loud.checks if c.name == "method_agreement")
    assert agreement.flags == (agreement.outcome in ("warn", "fail"))
    assert loud.settings["flag_policy"]["region_focus"] == DEFAULT_FLAG_POLICY["region_focus"]  # the rest kept


@pytest.mark.parametrize(("policy", "words"), [({"focus": "note"}, "unknown check 'focus'"),
                                               ({"deletion": "sometimes"}, "rule 'sometimes'"),
                                               ("note", "must map check names")])
def test_a_bad_policy_is_refused_in_one_line(marker_net, test_picture, policy, words):
    with pytest.raises(ExplainError, match=words) as info:
        _run(marker_net, test_picture, flag_policy=policy)
    assert "\n" not in str(info.value)
