"""The review page as a Flask application: sign-in, the reader's queue, a case, the verdict, the summary.

Every request but the sign-in page and the style sheet needs a live session; every POST also needs the
CSRF token that came with the form (the sign-in form's token is tied to a cookie of its own), and
every request a Host header that names a loopback address. Each
refusal is a page with one line and writes nothing; the only write besides a verdict is a
``sign_in_failed`` entry (casefile.server.signin). Addresses are checked against fixed patterns and the
ledger before anything else is read: a draw, case, map or picture that is not in the reader's queue is
"not found", whatever the path says.
"""

from __future__ import annotations

import ipaddress
import secrets
import threading
import time
from collections.abc import Callable
from typing import Any

from flask import Flask, Response, abort, g, redirect, render_template, request, url_for
from werkzeug.exceptions import HTTPException

from casefile.cautions import AGREEMENT_CAUTION, CAUTION_TITLE, PAGE_CAUTIONS
from casefile.errors import CasefileError, ValidationError
from casefile.ledger import Ledger
from casefile.review.readings import VERDICTS, record_review
from casefile.server import charts, views
from casefile.server.sessions import DEFAULT_MINUTES, Session, Sessions, same_token
from casefile.server.signin import SignInGuard

SESSION_COOKIE = "casefile_session"
FORM_COOKIE = "casefile_form"
MAX_NOTE = 4000
SECURITY_HEADERS = {
    "Content-Security-Policy": "default-src 'none'; img-src 'self'; style-src 'self'; script-src 'self'; "
                               "form-action 'self'; frame-ancestors 'none'; base-uri 'none'",
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",
    "Cache-Control": "no-store",
    "X-Frame-Options": "DENY",
}


def loopback_host(host: str) -> bool:
    """True when a request's Host header names a loopback address (with or without a port): anything
    else reached this loopback server through a name pointed at it (DNS rebinding) and is refused."""
    name = host.strip().lower()
    if name.startswith("["):
        name = name[1:].split("]", 1)[0]
    elif name.count(":") == 1:
        name = name.split(":", 1)[0]
    if name == "localhost":
        return True
    try:
        return ipaddress.ip_address(name).is_loopback
    except ValueError:
        return False


def create_app(ledger: Ledger, *, session_minutes: float = DEFAULT_MINUTES,
               clock: Callable[[], float] = time.time, sign_in_limit: int | None = None) -> Flask:
    """The review page over ``ledger``. ``clock`` (seconds) drives session expiry and the sign-in limit."""
    app = Flask(__name__)
    app.config.update(MAX_CONTENT_LENGTH=64 * 1024)
    sessions = Sessions(session_minutes, clock)
    guard = SignInGuard(ledger, clock=clock, **({"limit": sign_in_limit} if sign_in_limit else {}))
    # one writer at a time in this process: a sign-in's count and its record, a verdict's check and its entry
    writing = threading.Lock()
    app.extensions["casefile"] = {"ledger": ledger, "sessions": sessions, "guard": guard, "lock": writing}

    def refuse(status: int, line: str) -> Response:
        resp = Response(render_template("refused.html", line=line, status=status, reader=_reader()), status)
        return resp

    def _reader() -> str | None:
        s = g.get("session")
        return s.reader if s else None

    @app.before_request
    def _load_session() -> Response | None:
        if not loopback_host(request.host):
            g.session, g.session_state = None, "none"
            return refuse(400, "this page answers only on a loopback address (127.0.0.1, ::1 or localhost)")
        state, s = sessions.find(request.cookies.get(SESSION_COOKIE))
        g.session, g.session_state = s, state
        if request.endpoint in ("sign_in", "static") or request.endpoint is None:
            return None
        if s is None:
            if request.method == "GET":  # the sign-in page says so when the session expired
                return redirect(url_for("sign_in"), 303)
            line = ("your session has expired; sign in again" if state == "expired"
                    else "you are not signed in; sign in first")
            return refuse(401, line)
        if request.method == "POST" and not same_token(s.csrf, request.form.get("csrf")):
            return refuse(403, "the form's security token is missing or wrong; reload the page and try again")
        return None

    @app.after_request
    def _headers(resp: Response) -> Response:
        for k, v in SECURITY_HEADERS.items():
            resp.headers.setdefault(k, v)
        return resp

    @app.errorhandler(HTTPException)
    def _http_error(exc: HTTPException) -> Response:
        words = {404: "not found: that page, draw or case is not in your queue",
                 409: "you have already read this case for this draw; your reading is kept as it was",
                 405: "that action is not allowed here", 413: "the form was too large"}
        return refuse(exc.code or 500, words.get(exc.code or 500, exc.name))

    @app.errorhandler(views.NotInQueue)
    def _not_in_queue(exc: views.NotInQueue) -> Response:
        return refuse(404, f"not found: {exc}")

    @app.context_processor
    def _common() -> dict[str, Any]:
        s: Session | None = g.get("session")
        return {"reader": s.reader if s else None, "csrf": s.csrf if s else "", "caution_title": CAUTION_TITLE,
                "page_cautions": PAGE_CAUTIONS, "agreement_caution": AGREEMENT_CAUTION}

    # ------------------------------------------------------------------ signing in and out
    @app.route("/sign-in", methods=["GET", "POST"])
    def sign_in() -> Response:
        form_cookie = request.cookies.get(FORM_COOKIE) or ""
        if request.method == "GET":
            fresh = not form_cookie
            form_cookie = form_cookie or secrets.token_urlsafe(24)
            note = "your session has expired; sign in again" if g.session_state == "expired" else None
            resp = Response(render_template("sign_in.html", form_csrf=sessions.form_token(form_cookie),
                                            message=note, reader_id=""))
            if fresh:
                resp.set_cookie(FORM_COOKIE, form_cookie, httponly=True, samesite="Strict", max_age=3600)
            return resp
        if not sessions.form_token_ok(form_cookie, request.form.get("csrf")):
            return refuse(403, "the sign-in form's security token is missing or wrong; reload the sign-in page")
        with writing:
            result = guard.attempt(request.form.get("reader", ""), request.form.get("password", ""),
                                   request.remote_addr or "unknown")
        if not result.ok or result.reader is None:
            return Response(render_template("sign_in.html", form_csrf=sessions.form_token(form_cookie),
                                            message=result.message, reader_id=request.form.get("reader", "")[:64]),
                            401)
        old = request.cookies.get(SESSION_COOKIE)
        if old:
            sessions.end(old)
        s = sessions.start(result.reader)
        resp = redirect(url_for("queue_page"), 303)
        resp.set_cookie(SESSION_COOKIE, s.token, httponly=True, samesite="Strict",
                        max_age=int(sessions.seconds))
        return resp

    @app.post("/sign-out")
    def sign_out() -> Response:
        sessions.end(g.session.token)
        resp = redirect(url_for("sign_in"), 303)
        resp.delete_cookie(SESSION_COOKIE)
        return resp

    # ------------------------------------------------------------------ pages
    @app.get("/")
    def home() -> Response:
        return redirect(url_for("queue_page"), 303)

    @app.get("/queue")
    def queue_page() -> str:
        draws = views.queue(ledger, g.session.reader)
        return render_template("queue.html", draws=draws, waiting=sum(len(d["waiting"]) for d in draws))

    def _case_page(draw_id: str, case_id: str, *, problem: str | None = None,
                   form: dict[str, str] | None = None, status: int = 200) -> Response:
        where = views.place(ledger, draw_id, case_id)
        view = request.args.get("view", "overlay")
        view = view if view in views.VIEWS else "overlay"
        case = views.case_view(ledger, where, g.session.reader)
        method = request.args.get("map") or (case["maps"][0]["method"] if case["maps"] else "")
        if case["maps"] and method not in {m["method"] for m in case["maps"]}:
            method = case["maps"][0]["method"]
        html = render_template("case.html", case=case, view=view, method=method, verdicts=VERDICTS,
                               opacity=views.opacity_step(request.args.get("opacity")),
                               opacity_steps=views.OPACITY_STEPS, problem=problem, form=form or {})
        return Response(html, status)

    @app.get("/draws/<draw_id>/cases/<case_id>")
    def case_page(draw_id: str, case_id: str) -> Response:
        return _case_page(draw_id, case_id)

    def _record(where: views.Place, reader: str, draw_id: str, case_id: str, form: dict[str, str]) -> str | None:
        """Record the verdict, or say in one line why not (nothing written then)."""
        if views.my_reading(ledger, reader, draw_id, case_id) is not None:
            abort(409)
        if form["verdict"] not in VERDICTS:
            return "choose agree, disagree or unsure"
        if len(form["note"]) > MAX_NOTE:
            return f"the note is longer than {MAX_NOTE} characters"
        label = form["label"].strip() or None
        if label is not None and label not in where.case.body["model"]["labels"]:
            return f"label {label!r} is not one of the model's labels"
        try:
            record_review(ledger, case_id, reader=reader, verdict=form["verdict"], label=label,
                          note=form["note"].strip() or None, draw_id=draw_id)
        except ValidationError as exc:
            return str(exc).split(": ", 1)[-1]
        return None

    @app.post("/draws/<draw_id>/cases/<case_id>/verdict")
    def verdict(draw_id: str, case_id: str) -> Response:
        where = views.place(ledger, draw_id, case_id)
        reader = g.session.reader
        form = {k: request.form.get(k, "") for k in ("verdict", "label", "note")}
        with writing:
            problem = _record(where, reader, draw_id, case_id, form)
        if problem is not None:
            return _case_page(draw_id, case_id, problem=problem, form=form, status=400)
        return redirect(url_for("case_page", draw_id=draw_id, case_id=case_id, _anchor="answered"), 303)

    def _png(data: bytes) -> Response:
        return Response(data, 200, mimetype="image/png")

    @app.get("/draws/<draw_id>/cases/<case_id>/image.png")
    def display_image(draw_id: str, case_id: str) -> Response:
        return _png(views.display_png(ledger, views.place(ledger, draw_id, case_id)))

    @app.get("/draws/<draw_id>/cases/<case_id>/maps/<method>/overlay.png")
    def map_overlay(draw_id: str, case_id: str, method: str) -> Response:
        return _png(views.overlay_png(ledger, views.place(ledger, draw_id, case_id), method))

    @app.get("/draws/<draw_id>/cases/<case_id>/maps/<method>/layer.png")
    def map_layer(draw_id: str, case_id: str, method: str) -> Response:
        return _png(views.layer_png(ledger, views.place(ledger, draw_id, case_id), method))

    @app.get("/scale.png")
    def scale_picture() -> Response:
        return _png(views.scale_png())

    @app.get("/summary")
    def summary_page() -> str:
        s = views.summary(ledger, g.session.reader)
        rel = s.get("reliability")
        return render_template("summary.html", s=s, rates_svg=charts.draw_rates_svg(s["draws"]),
                               reliability_svg=charts.reliability_svg(rel), rel=rel,
                               confusion=s["agreement"]["confusion"])

    @app.errorhandler(CasefileError)
    def _casefile_error(exc: CasefileError) -> Response:
        return refuse(400, str(exc).splitlines()[0] if str(exc) else type(exc).__name__)

    return app


__all__ = ["FORM_COOKIE", "SESSION_COOKIE", "create_app", "loopback_host"]
