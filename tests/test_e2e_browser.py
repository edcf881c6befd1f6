"""End to end in a real browser: Debian's Chromium driven by Playwright against the live server.

One scenario, told in steps: the analyst creates a decision and builds its model
(seeing the core's message beside a bad field while typing), sees the results
and submits; operations rejects with a reason; the analyst saves a corrected
version and resubmits; financial review and operations approve; the analyst
records the recommended plan and commits, later records the outcome and reads the
review and the portfolio; a user of another team sees nothing.
Screenshots of each main page go to test-artifacts/screenshots/ (gitignored).

Skips with the reason when Chromium or the playwright package is missing
(``apt-get install chromium``; ``pip install playwright``; browsers are never
downloaded: ``executable_path`` points at Debian's build).
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest
from django.db import connection

from decisions.models import Decision, Status
from tests.dbutil import purge_register
from tests.personas import PASSWORD, build_personas

CHROMIUM = "/usr/bin/chromium"
# The flags of /work/shared/TOOLING.md: no sandbox in containers, no GPU, no network chatter.
LAUNCH_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
               "--disable-background-networking", "--disable-component-update", "--disable-sync"]
SHOTS = Path(__file__).resolve().parent.parent / "test-artifacts" / "screenshots"

try:
    from playwright.sync_api import expect, sync_playwright
except ImportError:  # pragma: no cover - depends on the machine
    sync_playwright = None

pytestmark = [
    pytest.mark.e2e,
    pytest.mark.skipif(sync_playwright is None,
                       reason="the playwright package is not installed (pip install playwright)"),
    pytest.mark.skipif(not (os.path.exists(CHROMIUM) or shutil.which("chromium")),
                       reason=f"Chromium not found at {CHROMIUM} (apt-get install chromium)"),
]


@pytest.fixture
def browser():
    with sync_playwright() as p:
        executable = CHROMIUM if os.path.exists(CHROMIUM) else shutil.which("chromium")
        browser = p.chromium.launch(executable_path=executable, args=LAUNCH_ARGS)
        try:
            yield browser
        finally:
            browser.close()


class Session:
    """One person's browser context (their own cookies), signed in through the form."""

    def __init__(self, browser, base_url: str, username: str):
        self.context = browser.new_context(viewport={"width": 1280, "height": 900})
        self.context.set_default_timeout(10_000)
        self.page = self.context.new_page()
        self.base = base_url
        self.page.goto(f"{base_url}/")
        self.page.get_by_label("Username").fill(username)
        self.page.get_by_label("Password").fill(PASSWORD)
        self.page.get_by_role("button", name="Sign in").click()
        expect(self.page.get_by_role("heading", name="Your decisions")).to_be_visible()

    def shot(self, name: str) -> None:
        SHOTS.mkdir(parents=True, exist_ok=True)
        self.page.screenshot(path=str(SHOTS / f"{name}.png"), full_page=True)

    def open(self, path: str) -> None:
        self.page.goto(f"{self.base}{path}")

    def sign(self, meaning: str, reason: str = "") -> None:
        page = self.page
        page.get_by_label("approve" if meaning == "approve" else "reject", exact=True).check()
        if reason:
            page.get_by_label("Reason").fill(reason)
        page.get_by_label("Your password, again").fill(PASSWORD)
        page.get_by_role("button", name="Record my sign-off").click()

    def close(self) -> None:
        self.context.close()


def fill_table(page, *, deep_cold: str) -> None:
    """Fill a blank table; the fields' labels name rows by position until the page is redrawn."""
    page.get_by_label("Name of state 1").fill("hot")
    page.get_by_label("Prior probability of state 1").fill("0.4")
    page.get_by_label("Name of state 2").fill("cold")
    page.get_by_label("Prior probability of state 2").fill("0.6")
    page.get_by_label("Name of alternative 1").fill("Deep well")
    page.get_by_label("Payoff of alternative 1 if state 1").fill("9,000,000")
    page.get_by_label("Payoff of alternative 1 if state 2").fill(deep_cold)
    page.get_by_label("Name of alternative 2").fill("Stay on gas")
    page.get_by_label("Payoff of alternative 2 if state 1").fill("2500000")
    page.get_by_label("Payoff of alternative 2 if state 2").fill("2500000")


@pytest.fixture
def register_purged():
    """The live server needs committed rows (a transactional test); the append-only
    triggers would refuse the runner's flush afterwards, so empty those tables first."""
    yield
    purge_register()
    # Close the connection the purge used: left open, it keeps a session on the test
    # database and PostgreSQL then refuses to drop that database at the end of the run.
    connection.close()


@pytest.mark.django_db(transaction=True)
def test_decision_from_model_to_commit_in_the_browser(live_server, browser, settings,
                                                      register_purged):
    settings.PASSWORD_HASHERS = ["django.contrib.auth.hashers.MD5PasswordHasher"]
    build_personas()
    base = live_server.url

    # Analyst: sign in, create the decision, build the model.
    ana = Session(browser, base, "ana")
    ana.shot("01-dashboard-analyst")
    ana.page.get_by_role("link", name="New decision").click()
    ana.page.get_by_label("Title").fill("Heat source for the east district (invented)")
    ana.page.get_by_label("Financial review sign-offs").fill("1")
    ana.page.get_by_label("Operations sign-offs").fill("1")
    ana.page.get_by_role("button", name="Create the decision").click()
    expect(ana.page.get_by_role("heading", name="Edit the model: payoff table")).to_be_visible()
    decision = Decision.objects.get(title="Heat source for the east district (invented)")

    fill_table(ana.page, deep_cold="-1000000")
    # A probability above 1: the core's message appears beside the field while typing.
    ana.page.get_by_label("Prior probability of state 2").fill("1.2")
    expect(ana.page.locator("#err-state-1-probability")).to_contain_text(
        "states[1].probability: must be within [0, 1], got 1.2")
    ana.shot("02-editor-live-validation")
    # Saving anyway: the server refuses, and every typed value is still there.
    ana.page.get_by_role("button", name="Save as a new version").click()
    expect(ana.page.locator("#err-state-1-probability")).to_contain_text("got 1.2")
    expect(ana.page.get_by_label("Payoff of Deep well if hot")).to_have_value("9,000,000")
    ana.page.get_by_label("Prior probability of cold").fill("0.6")
    expect(ana.page.locator("#live-status")).to_contain_text("Valid. Expected value 3,000,000 EUR")
    ana.page.get_by_role("button", name="Save as a new version").click()

    # Results of version 1 (by hand: 0.4*9e6 + 0.6*(-1e6) = 3.0e6; EVPI 5.1e6 - 3.0e6 = 2.1e6).
    results = ana.page.locator("section", has=ana.page.get_by_role("heading", name="Results"))
    expect(results).to_contain_text("3,000,000 EUR")
    expect(results).to_contain_text("2,100,000 EUR")
    ana.shot("03-decision-results")
    ana.page.get_by_role("button", name="Submit version 1 for sign-off").click()
    expect(ana.page.locator(".lede .badge")).to_have_text("submitted")

    # Operations rejects with a reason.
    olga = Session(browser, base, "olga")
    expect(olga.page.locator("section.highlight")).to_contain_text(decision.title)
    olga.shot("04-dashboard-waiting-for-signoff")
    olga.page.locator("section.highlight").get_by_role("link", name=decision.title).click()
    olga.shot("05-signoff-panel")
    olga.sign("reject", "Cold-case payoff ignores the drilling insurance (invented).")
    expect(olga.page.locator(".messages")).to_contain_text("You rejected version 1")
    expect(olga.page.locator(".lede .badge")).to_have_text("draft")

    # Analyst sees the reason, saves version 2, compares it with version 1, resubmits.
    ana.page.reload()
    expect(ana.page.locator(".disabled-reason", has_text="was rejected by Olga Operations")
           ).to_contain_text("Cold-case payoff ignores the drilling insurance")
    ana.page.get_by_role("link", name="Edit the model", exact=True).click()
    ana.page.get_by_label("Payoff of Deep well if cold").fill("-800000")
    ana.page.get_by_label("What changed").fill("insurance covers part of a cold well")
    ana.page.get_by_role("button", name="Save as a new version").click()
    # 0.4*9e6 + 0.6*(-0.8e6) = 3.12e6 (by hand)
    expect(ana.page.locator("section", has=ana.page.get_by_role("heading", name="Results"))
           ).to_contain_text("3,120,000 EUR")
    ana.page.get_by_role("button", name="Show the differences").click()
    expect(ana.page.locator("table.diff")).to_contain_text("alternatives[name=Deep well].payoffs.cold")
    ana.shot("06-version-diff")
    ana.page.get_by_role("link", name=decision.title).click()
    ana.page.get_by_role("button", name="Submit version 2 for sign-off").click()

    # Two approvers sign in turn.
    fred = Session(browser, base, "fred")
    fred.open(f"/decisions/{decision.pk}/")
    fred.sign("approve")
    expect(fred.page.locator(".messages")).to_contain_text("You approved version 2")
    olga.open(f"/decisions/{decision.pk}/")
    olga.sign("approve")
    expect(olga.page.locator(".lede .badge")).to_have_text("approved")

    # Analyst records the recommended plan and commits.
    ana.page.reload()
    ana.page.get_by_label("Take the recommended plan").check()
    ana.page.get_by_role("button", name="Record the plan").click()
    ana.page.get_by_role("button", name="Commit the decision").click()
    expect(ana.page.locator(".lede .badge")).to_have_text("committed")
    expect(ana.page.locator("#audit")).to_contain_text("decision.commit")
    ana.shot("07-decision-committed")

    # Later: the analyst records what happened and opens the review. By hand: expected
    # 3,120,000 at approval; the reservoir was cold (P = 0.6); with hindsight gas
    # (2,500,000) beat the well (-800,000): regret 3,300,000.
    ana.page.get_by_role("link", name="Record the outcome").click()
    ana.page.get_by_label("State [a0]").select_option("cold")
    ana.page.get_by_label("Realised value").fill("-900,000")
    ana.page.get_by_label("Note").fill("Cold reservoir; the well was reused as a ground loop "
                                       "(invented).")
    ana.shot("08-outcome-form")
    ana.page.get_by_role("button", name="Record the outcome").click()
    expect(ana.page.get_by_role("heading", name="Review: expected vs realised")).to_be_visible()
    hindsight = ana.page.locator("section", has=ana.page.get_by_role("heading", name="With hindsight"))
    expect(hindsight).to_contain_text("3,300,000 EUR")
    expect(ana.page.locator("main")).to_contain_text("0.600")
    ana.shot("09-review")
    ana.page.get_by_role("link", name="Portfolio").click()
    expect(ana.page.locator("main")).to_contain_text("3,120,000 EUR")
    ana.shot("10-portfolio")

    # A user of another team sees none of it.
    omar = Session(browser, base, "omar")
    expect(omar.page.locator("main")).not_to_contain_text(decision.title)
    response = omar.page.goto(f"{base}/decisions/{decision.pk}/")
    assert response.status == 404
    omar.shot("11-outsider-404")

    decision.refresh_from_db()
    assert decision.status == Status.COMMITTED
    assert decision.versions.count() == 2
    for session in (ana, olga, fred, omar):
        session.close()


@pytest.mark.django_db(transaction=True)
def test_api_documentation_page_builds_itself_under_the_strict_policy(live_server, browser):
    # The page's script is a static file: the browser enforces script-src 'self' and
    # still lists the operations; a blocked script would leave "Loading the schema…".
    context = browser.new_context()
    page = context.new_page()
    refused = []
    page.on("console", lambda msg: refused.append(msg.text)
            if "Content Security Policy" in msg.text else None)
    try:
        page.goto(f"{live_server.url}/api/docs/")
        expect(page.get_by_role("heading", name="/api/evaluate/")).to_be_visible()
        expect(page.locator("#ops")).not_to_contain_text("Loading the schema")
        assert refused == []
    finally:
        context.close()
