"""The review page on a ledger kept in PostgreSQL: sign-in, queue, case page, verdict, summary and a
failed sign-in behave as on SQLite, and the entries land in the server's ledger.

Outside sources: a real PostgreSQL server (a throwaway cluster, tests/ledger/pgserver.py); RFC 9110
sections 15.3.1, 15.4.4 and 15.5.2 for the status codes 200, 303 and 401.
"""

from __future__ import annotations

import threading

from werkzeug.serving import make_server

from casefile.ledger import Ledger, copy_ledger
from casefile.server import create_app
from tests.server.client import Client
from tests.server.conftest import PASSWORDS


def test_a_reader_reads_a_case_on_a_postgresql_ledger(built, pg_url, clock):
    copy_ledger(str(built["store"]), pg_url)
    led = Ledger(pg_url)
    srv = make_server("127.0.0.1", 0, create_app(led, session_minutes=30, clock=clock), threaded=True)
    t = threading.Thread(target=srv.serve_forever, daemon=True)
    t.start()
    try:
        c = Client(f"http://127.0.0.1:{srv.server_port}")
        assert c.sign_in("ana", "not the password").status == 401
        assert c.sign_in("ana", PASSWORDS["ana"]).status == 303
        queue = c.get("/queue")
        assert queue.status == 200 and all(m in queue.text for m in built["members"])
        case = f"/draws/{built['draw_id']}/cases/{built['members'][1]}"
        page = c.get(case)
        assert page.status == 200 and "ben-secret-note" not in page.text
        done = c.post(case + "/verdict", {"csrf": page.csrf(), "verdict": "disagree", "label": "porosity",
                                          "note": "seen on the server ledger"})
        assert done.status == 303
        assert c.get("/summary").status == 200
    finally:
        srv.shutdown()
        srv.server_close()
        t.join(timeout=10)
    reviews = [e.body for e in led.entries("review")]
    assert [(b["reader"], b["verdict"], b.get("label")) for b in reviews] == [
        ("ben", "disagree", "crack"), ("ana", "disagree", "porosity")]
    assert reviews[-1]["draw_id"] == built["draw_id"] and reviews[-1]["case_id"] == built["members"][1]
    failed = [e.body for e in led.entries("sign_in_failed")]
    assert len(failed) == 1 and failed[0]["reader"] == "ana"
    assert led.verify().ok
    led.close()
