"""Load the invented demo scenario into an empty database.

Everything here is invented: the Northfield Heat Cooperative, its people, the
drilling-survey firm Tellurion Surveys and every figure. The demo puts one
decision in each status (draft, submitted, approved, committed, closed, and one
rejected back to draft) so every page and endpoint has something to show.
"""

import copy
import json
from pathlib import Path

from django.conf import settings
from django.contrib.auth import get_user_model
from django.core.management.base import BaseCommand, CommandError
from django.db import transaction

from decisions.demo_sources import load_demo_sources
from decisions.services import decisions as svc
from decisions.services import signoff, teams
from decisions.services.locking import IF_MATCH_ANY

DEMO_PASSWORD = "demo-pass-2026"  # documented in the README; demo data only
TEAM = "Northfield Heat Cooperative (invented)"
OTHER_TEAM = "Eastmoor Water Board (invented)"
DEMO_USERS = [
    ("ana", "Ana Analyst", "analyst"),
    ("fred", "Fred Finance", "financial review"),
    ("olga", "Olga Operations", "operations"),
    ("bea", "Bea Budget", "budget holder"),
    ("vic", "Vic Viewer", "viewer"),
    ("omar", "Omar Outsider", "analyst (another team)"),
]
STAFF_USER = ("sam", "Sam Steward", "staff: team administration and the admin site")
FIXTURES = Path(settings.BASE_DIR) / "fixtures"


def _model(name: str) -> dict:
    """A model document of the scenario from fixtures/ (the lead's), else our own small one."""
    path = FIXTURES / name
    if not path.exists():
        path = FIXTURES / "demo_models.json"
        return json.loads(path.read_text(encoding="utf-8"))["payoff_table"]
    return json.loads(path.read_text(encoding="utf-8"))


class Command(BaseCommand):
    help = "Create the invented demo team, users and decisions (refuses a non-empty database)."

    def add_arguments(self, parser):
        parser.add_argument("--if-empty", action="store_true", help="do nothing if users exist")

    def handle(self, *args, if_empty=False, **options):
        user_model = get_user_model()
        if user_model.objects.exists():
            if if_empty:
                self.stdout.write("Demo data: the database already has users; left as it is.")
                self._print_logins()
                return
            raise CommandError("load_demo: the database is not empty; use a fresh database")
        with transaction.atomic():
            self._load(user_model)
        self._print_logins()

    def _load(self, user_model):
        users = {}
        for username, full_name, _role in [*DEMO_USERS, STAFF_USER]:
            first, last = full_name.split(" ", 1)
            users[username] = user_model.objects.create_user(
                username, password=DEMO_PASSWORD, first_name=first, last_name=last,
                is_staff=(username == STAFF_USER[0]),
            )
        sam = users["sam"]
        team = teams.create_team(actor=sam, name=TEAM)
        other = teams.create_team(actor=sam, name=OTHER_TEAM)
        for username, _name, role in DEMO_USERS:
            if username == "omar":
                teams.add_member(actor=sam, team=other, user=users[username], role="analyst")
            else:
                teams.add_member(actor=sam, team=team, user=users[username], role=role)

        table, tree = _model("heating_payoff_table.json"), _model("heating_tree.json")
        ana, fred, olga, bea = users["ana"], users["fred"], users["olga"], users["bea"]
        policy = {"financial review": 1, "operations": 1}
        full_policy = {**policy, "budget holder": 1}

        def new(title, doc, note, pol=policy):
            d = svc.create_decision(actor=ana, team=team, title=title, policy=pol)
            svc.save_version(d.pk, actor=ana, document=doc, change_note=note,
                             source_note="Invented demo model", if_match=IF_MATCH_ANY)
            return d

        def sign(d, user, role, meaning="approve", reason=""):
            signoff.sign(d.pk, d.current_version().number, actor=user, password=DEMO_PASSWORD,
                         role=role, meaning=meaning, reason=reason, if_match=IF_MATCH_ANY)

        def approve(d, pol=policy):
            svc.submit_version(d.pk, actor=ana, if_match=IF_MATCH_ANY)
            people = {"financial review": fred, "operations": olga, "budget holder": bea}
            for role in pol:
                sign(d, people[role], role)

        # draft
        new("Winter peak: back-up boilers (invented)", tree, "first tree of the peak options")
        # submitted, one of two sign-offs given
        d = new("Heat source for the district network (invented)", table,
                "priors from the regional geology map", full_policy)
        svc.submit_version(d.pk, actor=ana, if_match=IF_MATCH_ANY)
        sign(d, fred, "financial review")
        # approved
        d = new("Second well site: north field (invented)", table, "same model, north site")
        approve(d)
        # committed, with the team's own plan and the value given up
        d = new("Pump station upgrade (invented)", table, "pump options as alternatives")
        approve(d)
        results = d.current_version().results
        alternatives = [a["name"] for a in results.get("alternatives", [])]
        other_plan = alternatives[-1] if alternatives else ""
        svc.record_strategy(d.pk, actor=ana, if_match=IF_MATCH_ANY, recommended=False,
                            alternative=other_plan,
                            justification="The board keeps capital for the network extension "
                                          "(invented).")
        svc.commit_decision(d.pk, actor=ana, if_match=IF_MATCH_ANY)
        # closed
        d = new("Heat storage tank (invented)", table, "storage sizes as alternatives")
        approve(d)
        svc.record_strategy(d.pk, actor=ana, if_match=IF_MATCH_ANY, recommended=True)
        svc.commit_decision(d.pk, actor=ana, if_match=IF_MATCH_ANY)
        svc.close_decision(d.pk, actor=ana, if_match=IF_MATCH_ANY, note="tank built (invented)")
        # rejected, back to draft with a new version
        d = new("Shallow ground loop pilot (invented)", table, "first estimate")
        svc.submit_version(d.pk, actor=ana, if_match=IF_MATCH_ANY)
        sign(d, olga, "operations", "reject", "Loop field area is not confirmed (invented).")
        revised = copy.deepcopy(table)
        revised["title"] = f"{table.get('title', 'model')} (revised)"
        svc.save_version(d.pk, actor=ana, document=revised, change_note="after operations review",
                         if_match=IF_MATCH_ANY)
        # the outsider's own decision, in the other team
        svc.create_decision(actor=users["omar"], team=other,
                            title="Reservoir intake screen (invented)", policy=policy)
        load_demo_sources(team=team, users=users, password=DEMO_PASSWORD)  # sources, outcomes

    def _print_logins(self):
        self.stdout.write(f"Demo logins (invented people; password for all: {DEMO_PASSWORD}):")
        for username, full_name, role in [*DEMO_USERS, STAFF_USER]:
            self.stdout.write(f"  {username:6} {full_name:18} {role}")
