"""The network guard itself: a request outside 127.0.0.1 is aborted and recorded.

Without this check a guard that let everything through (or saw nothing) would
make every "no outside request" assertion of the layer pass vacuously.
"""

from __future__ import annotations

from typing import Any

import pytest
from .harness import LabServer, open_session

pytestmark = pytest.mark.browser


def test_outside_requests_are_aborted_and_recorded(browser: Any, lab_server: LabServer) -> None:
    s = open_session(browser, origin=lab_server.url)
    try:
        page = s.page
        # A local request goes through (and is seen by the router).
        response = page.goto(f"{lab_server.url}/api/status?token={lab_server.token}")
        assert response is not None and response.status == 200
        assert s.guard.blocked == []
        assert any(u.startswith(f"{lab_server.url}/api/status") for u in s.guard.requests)
        # Outside requests from a page without a restrictive CSP (Jupyter's API pages have
        # one, which would stop the probes before they reach the router).
        page.goto("about:blank")
        page.set_content("<p>probe</p>")
        outcome = page.evaluate(
            """async () => {
                try { await fetch('https://example.org/nbeda-probe.js', {mode: 'no-cors'}); return 'fetched'; }
                catch (e) { return 'blocked'; }
            }"""
        )
        assert outcome == "blocked"
        page.evaluate(
            """() => new Promise(done => {
                const img = new Image();
                img.onload = img.onerror = () => done();
                img.src = 'http://203.0.113.7/pixel.png';
            })"""
        )
        assert s.guard.blocked == ["https://example.org/nbeda-probe.js", "http://203.0.113.7/pixel.png"]
        with pytest.raises(AssertionError, match="outside 127.0.0.1"):
            s.guard.assert_clean()
    finally:
        s.close()
