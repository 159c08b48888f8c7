"""The review page refuses, and writes nothing, without a session, with a wrong password, after the
session expired, without the right CSRF token, for a case outside the reader's queue and for paths that
climb out of it; failed sign-ins are recorded and rate-limited; other readers' verdicts stay out of the
page until the reader has answered.

Outside sources: RFC 9110 (HTTP semantics) sections 15.5.2, 15.5.4, 15.5.5 and 15.5.10 for the status
codes 401, 403, 404 and 409; the OWASP Cross-Site Request Forgery Prevention Cheat Sheet (synchroniser
token pattern, common practice) for what a missing or wrong token must do; RFC 3986 section 5.2.4 for
the dot segments the path tests send raw.
"""

from __future__ import annotations

import threading

import pytest

from casefile.errors import UsageError
from casefile.server import check_host, create_app
from tests.server.client import Client
from tests.server.conftest import PASSWORDS


def state(ledger):
    return ledger.head()


def case_path(built, case_id=None):
    return f"/draws/{built['draw_id']}/cases/{case_id or built['members'][1]}"


def verdict_form(csrf, verdict="agree", label="", note=""):
    return {"csrf": csrf, "verdict": verdict, "label": label, "note": note}


def signed_in(base):
    c = Client(base)
    assert c.sign_in("ana", PASSWORDS["ana"]).status == 303
    return c


def test_no_session_is_sent_to_sign_in_and_cannot_post(server, built):
    base, ledger, _ = server
    before = state(ledger)
    c = Client(base)
    page = c.get("/queue")
    assert page.status == 303 and page.headers["location"].endswith("/sign-in")  # RFC 9110 15.4.4
    done = c.post(case_path(built) + "/verdict", verdict_form("anything"))
    assert done.status == 401 and "not signed in" in done.text
    assert c.get(case_path(built) + "/image.png").status == 303
    assert state(ledger) == before


def test_a_wrong_password_records_one_failed_sign_in_and_nothing_else(server, built):
    base, ledger, _ = server
    seq, _ = state(ledger)
    c = Client(base)
    done = c.sign_in("ana", "not ana's password")
    assert done.status == 401 and "reader id or password is wrong" in done.text
    assert "casefile_session" not in c.cookies
    new = list(ledger.entries(start=seq + 1))
    assert [e.kind for e in new] == ["sign_in_failed"]
    assert new[0].body["reader"] == "ana" and new[0].body["reason"] == "wrong password"
    assert new[0].body["client"] == "127.0.0.1" and new[0].body["failures_in_window"] == 1
    assert c.get("/queue").status == 303  # still not signed in


def test_sign_in_without_its_form_token_is_refused_unrecorded(server):
    base, ledger, _ = server
    before = state(ledger)
    c = Client(base)
    c.get("/sign-in")
    for token in ("", "0" * 64):
        done = c.post("/sign-in", {"csrf": token, "reader": "ana", "password": PASSWORDS["ana"]})
        assert done.status == 403 and "security token" in done.text
    assert "casefile_session" not in c.cookies and state(ledger) == before


def test_failed_sign_ins_are_rate_limited_even_across_a_restart(server, ledger, clock):
    base, _, _ = server
    seq, _ = state(ledger)
    c = Client(base)
    for _ in range(5):
        assert c.sign_in("ana", "a wrong guess!").status == 401
    locked = c.sign_in("ana", PASSWORDS["ana"])  # the right password, but the id is locked
    assert locked.status == 401 and "too many failed sign-ins for ana" in locked.text
    new = list(ledger.entries(start=seq + 1))
    assert [e.kind for e in new] == ["sign_in_failed"] * 5  # the refused sixth try is not recorded
    assert [e.body["failures_in_window"] for e in new] == [1, 2, 3, 4, 5]
    assert "locked_until" in new[-1].body and "locked_until" not in new[-2].body
    assert Client(base).sign_in("ben", PASSWORDS["ben"]).status == 303  # another reader is not locked
    restarted = create_app(ledger, clock=clock).test_client()
    page = restarted.get("/sign-in")
    token = page.get_data(as_text=True).split('name="csrf" value="')[1].split('"')[0]
    again = restarted.post("/sign-in", data={"csrf": token, "reader": "ana", "password": PASSWORDS["ana"]})
    assert again.status_code == 401 and "too many failed sign-ins" in again.get_data(as_text=True)
    clock.now += 15 * 60 + 1
    assert c.sign_in("ana", PASSWORDS["ana"]).status == 303
    assert ledger.head()[0] == seq + 5


def test_an_expired_session_is_refused(server, built, clock):
    base, ledger, _ = server
    c = signed_in(base)
    page = c.get(case_path(built))
    assert page.status == 200
    csrf = page.csrf()
    before = state(ledger)
    clock.now += 30 * 60 + 1
    done = c.post(case_path(built) + "/verdict", verdict_form(csrf))
    assert done.status == 401 and "session has expired" in done.text
    page = c.get("/queue")
    assert page.status == 303 and page.headers["location"].endswith("/sign-in")
    assert "your session has expired; sign in again" in c.get("/sign-in").text
    assert state(ledger) == before


@pytest.mark.parametrize("token", [None, "", "x" * 43])
def test_a_missing_or_wrong_csrf_token_is_refused(server, built, token):
    base, ledger, _ = server
    c = signed_in(base)
    assert c.get(case_path(built)).status == 200
    before = state(ledger)
    form = {"verdict": "agree", "label": "", "note": ""}
    if token is not None:
        form["csrf"] = token
    done = c.post(case_path(built) + "/verdict", form)
    assert done.status == 403 and "security token is missing or wrong" in done.text
    out = c.post("/sign-out", {} if token is None else {"csrf": token})
    assert out.status == 403 and c.get("/queue").status == 200  # still signed in
    assert state(ledger) == before


def test_a_case_outside_the_queue_is_not_found(server, built):
    base, ledger, _ = server
    c = signed_in(base)
    csrf = c.get("/queue").csrf()
    before = state(ledger)
    outside = case_path(built, built["outside"])
    assert c.get(outside).status == 404
    done = c.post(outside + "/verdict", verdict_form(csrf))
    assert done.status == 404 and "not in draw" in done.text
    other_draw = f"/draws/d-000000000000/cases/{built['members'][1]}"
    assert c.get(other_draw).status == 404
    assert c.post(other_draw + "/verdict", verdict_form(csrf)).status == 404
    assert c.get(case_path(built) + "/maps/nosuch/layer.png").status == 404
    assert state(ledger) == before


RAW_PATHS = [
    "/../../etc/passwd",
    "/static/../../../../../../etc/passwd",
    "/static/..%2f..%2f..%2f..%2f..%2f..%2fetc%2fpasswd",
    "/static/%2e%2e/%2e%2e/%2e%2e/%2e%2e/%2e%2e/etc/passwd",
    "/draws/../../etc/passwd",
    "/draws/{d}/cases/..%2F..%2F..%2Fetc%2Fpasswd",
    "/draws/{d}/cases/../../../etc/passwd",
    "/draws/{d}/cases/{c}/maps/..%2F..%2Fetc%2Fpasswd/layer.png",
    "/draws/..%2F..%2Fetc%2Fpasswd/cases/{c}/image.png",
]


@pytest.mark.parametrize("raw", RAW_PATHS)
def test_paths_that_climb_out_are_refused(server, built, raw):
    base, ledger, _ = server
    c = signed_in(base)
    csrf = c.get("/queue").csrf()
    before = state(ledger)
    path = raw.format(d=built["draw_id"], c=built["members"][1])
    got = c.get(path)
    assert got.status in (400, 404), (path, got.status)
    assert "root:" not in got.text
    posted = c.post(path.rstrip("/") + "/verdict", verdict_form(csrf))
    assert posted.status in (400, 404, 405), (path, posted.status)
    assert state(ledger) == before


def test_other_readers_verdicts_are_absent_until_this_reader_answers(server, built):
    base, ledger, _ = server
    c = signed_in(base)
    first = case_path(built, built["first"])  # ben read this one, with a note
    page = c.get(first)
    assert page.status == 200
    assert "ben-secret-note" not in page.text and 'id="others"' not in page.text
    assert ">ben<" not in page.text and "crack</td>" not in page.text
    done = c.post(first + "/verdict", verdict_form(page.csrf(), "agree", note="ana's note"))
    assert done.status == 303
    after = c.get(first)
    assert 'id="others"' in after.text and "ben-secret-note" in after.text
    again = c.post(first + "/verdict", verdict_form(after.csrf(), "unsure"))
    assert again.status == 409 and "already read" in again.text
    assert [e.body["reader"] for e in ledger.entries("review")] == ["ben", "ana"]


def test_a_label_outside_the_model_or_against_the_verdict_is_refused(server, built):
    base, ledger, _ = server
    c = signed_in(base)
    page = c.get(case_path(built))
    model_label = page.text.split('id="model-label">')[1].split("<")[0]
    before = state(ledger)
    bad = c.post(case_path(built) + "/verdict", verdict_form(page.csrf(), "disagree", label="granite"))
    assert bad.status == 400 and "not one of the model's labels" in bad.text
    same = c.post(case_path(built) + "/verdict", verdict_form(page.csrf(), "disagree", label=model_label))
    assert same.status == 400 and "is the model's own" in same.text
    none = c.post(case_path(built) + "/verdict", verdict_form(page.csrf(), "maybe"))
    assert none.status == 400 and "choose agree, disagree or unsure" in none.text
    assert state(ledger) == before


@pytest.mark.parametrize("host", ["0.0.0.0", "192.168.1.20", "example.org", "::"])
def test_serve_binds_to_loopback_only(host):
    with pytest.raises(UsageError, match="not a loopback address"):
        check_host(host)
    assert check_host("127.0.0.1") == "127.0.0.1" and check_host("::1") == "::1"


def test_every_page_carries_a_content_security_policy(server):
    base, _, _ = server
    got = Client(base).get("/sign-in")
    assert "default-src 'none'" in got.headers["content-security-policy"]
    assert got.headers["x-content-type-options"] == "nosniff"


@pytest.mark.parametrize("host", ["evil.example:8765", "10.1.2.3", "attacker.test", "127.0.0.1.evil.test:80"])
def test_a_host_header_that_is_not_loopback_is_refused(server, host):
    """A name pointed at 127.0.0.1 by someone else's DNS (rebinding) gets nothing, not even the form."""
    base, ledger, _ = server
    before = state(ledger)
    c = Client(base)
    got = c.send("GET", "/sign-in", headers={"Host": host})
    assert got.status == 400 and "only on a loopback address" in got.text
    assert "casefile_form" not in c.cookies
    posted = c.send("POST", "/sign-in", {"csrf": "x", "reader": "ana", "password": "guess guess"},
                    headers={"Host": host})
    assert posted.status == 400
    assert state(ledger) == before
    for ok in ("127.0.0.1:8765", "localhost", "[::1]:8765"):
        assert Client(base).send("GET", "/sign-in", headers={"Host": ok}).status == 200


def test_the_summary_leaves_out_cases_still_waiting_for_the_reader(server, built):
    base, ledger, _ = server
    c = signed_in(base)  # ana has read nothing; ben's disagreement on the first member is in the ledger
    page = c.get("/summary")
    assert page.status == 200
    assert "3 cases still wait for you" in page.text
    assert 'class="rate"' not in page.text and 'class="bin"' not in page.text
    assert "No readings with a reader label yet" in page.text  # ben's "crack" is not counted for ana
    assert "0 of 0 reviewed cases" in page.text
    ben = Client(base)
    assert ben.sign_in("ben", PASSWORDS["ben"]).status == 303
    his = ben.get("/summary")  # ben read the first member: his own reading counts for him
    assert "2 cases still wait for you" in his.text and "1 of 1 reviewed cases" in his.text


def test_the_same_verdict_sent_twice_at_once_is_recorded_once(server, built):
    """Two tabs sending one reader's verdict together: one entry, the other refused (RFC 9110 15.5.10)."""
    base, ledger, _ = server
    c = signed_in(base)
    csrf = c.get(case_path(built)).csrf()
    results = []

    def send():
        results.append(c.post(case_path(built) + "/verdict", verdict_form(csrf, "unsure")).status)

    threads = [threading.Thread(target=send) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=60)
    assert sorted(results) == [303, 409, 409, 409]
    assert [e.body["reader"] for e in ledger.entries("review")] == ["ben", "ana"]


def test_wrong_passwords_sent_at_once_still_stop_at_the_limit(server):
    base, ledger, _ = server
    seq, _ = state(ledger)
    statuses = []

    def guess(i):
        statuses.append(Client(base).sign_in("ana", f"wrong guess number {i}").status)

    threads = [threading.Thread(target=guess, args=(i,)) for i in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=120)
    assert statuses == [401] * 8
    assert [e.body["failures_in_window"] for e in ledger.entries(start=seq + 1)] == [1, 2, 3, 4, 5]
