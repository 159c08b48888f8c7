"""A small HTTP client for the review-page tests: sends the path exactly as given (no normalising of
``..``), keeps cookies, reads the form's CSRF token out of a page."""

from __future__ import annotations

import html
import http.client
import re
from dataclasses import dataclass
from http.cookies import SimpleCookie
from urllib.parse import urlencode, urlsplit

CSRF = re.compile(r'name="csrf" value="([^"]*)"')


@dataclass
class Reply:
    status: int
    headers: dict[str, str]
    text: str

    def csrf(self) -> str:
        found = CSRF.search(self.text)
        assert found, self.text[:400]
        return found.group(1)


class Client:
    def __init__(self, base: str) -> None:
        parts = urlsplit(base)
        self.host, self.port = parts.hostname, parts.port
        self.cookies: dict[str, str] = {}

    def send(self, method: str, path: str, form: dict[str, str] | None = None,
             headers: dict[str, str] | None = None) -> Reply:
        conn = http.client.HTTPConnection(self.host, self.port, timeout=30)
        headers = dict(headers or {})
        if self.cookies:
            headers["Cookie"] = "; ".join(f"{k}={v}" for k, v in self.cookies.items())
        body = None
        if form is not None:
            body = urlencode(form)
            headers["Content-Type"] = "application/x-www-form-urlencoded"
        # the path goes out exactly as given; a Host header of the test's own replaces the usual one
        conn.putrequest(method, path, skip_host="Host" in headers, skip_accept_encoding=True)
        for k, v in {**headers, "Content-Length": str(len(body or ""))}.items():
            conn.putheader(k, v)
        conn.endheaders(body.encode() if body else None)
        resp = conn.getresponse()
        text = html.unescape(resp.read().decode("utf-8", "replace"))  # messages read as a person reads them
        for value in resp.headers.get_all("Set-Cookie") or []:
            jar = SimpleCookie()
            jar.load(value)
            for name, morsel in jar.items():
                if morsel.value and morsel["max-age"] != "0":
                    self.cookies[name] = morsel.value
                else:
                    self.cookies.pop(name, None)
        reply = Reply(resp.status, {k.lower(): v for k, v in resp.getheaders()}, text)
        conn.close()
        return reply

    def get(self, path: str) -> Reply:
        return self.send("GET", path)

    def post(self, path: str, form: dict[str, str]) -> Reply:
        return self.send("POST", path, form)

    def sign_in(self, reader: str, password: str) -> Reply:
        page = self.get("/sign-in")
        return self.post("/sign-in", {"csrf": page.csrf(), "reader": reader, "password": password})
