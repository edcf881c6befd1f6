"""Shared people of the tests (invented): one team, every role, and an outsider.

Northfield Heat Cooperative (invented): ana (analyst), fred (financial review),
olga (operations), bea (budget holder), vic (viewer). Eastmoor Water Board
(invented): omar (analyst), the outsider. sam is the staff administrator who
sets the teams up. Everyone's password is PASSWORD.
"""

from __future__ import annotations

import copy
from types import SimpleNamespace

from django.contrib.auth import get_user_model

from decisions.services import teams

PASSWORD = "correct horse battery 42"
TEAM = "Northfield Heat Cooperative (invented)"
OTHER_TEAM = "Eastmoor Water Board (invented)"

PEOPLE = [
    ("ana", "Ana", "Analyst", TEAM, "analyst"),
    ("fred", "Fred", "Finance", TEAM, "financial review"),
    ("olga", "Olga", "Operations", TEAM, "operations"),
    ("bea", "Bea", "Budget", TEAM, "budget holder"),
    ("vic", "Vic", "Viewer", TEAM, "viewer"),
    ("omar", "Omar", "Outsider", OTHER_TEAM, "analyst"),
]

# A tiny invented payoff table (data built in code, not the demo fixture).
SMALL_TABLE = {
    "kind": "payoff_table",
    "title": "Heat source (invented test model)",
    "currency": "EUR",
    "objective": "max",
    "states": [{"name": "hot", "probability": 0.4}, {"name": "cold", "probability": 0.6}],
    "alternatives": [
        {"name": "Deep well", "payoffs": {"hot": 9000000, "cold": -1000000}},
        {"name": "Stay on gas", "payoffs": {"hot": 2500000, "cold": 2500000}},
    ],
}


def small_table(**changes) -> dict:
    doc = copy.deepcopy(SMALL_TABLE)
    doc.update(changes)
    return doc


def build_personas() -> SimpleNamespace:
    users = get_user_model().objects
    sam = users.create_user("sam", password=PASSWORD, first_name="Sam", last_name="Staff",
                            is_staff=True)
    team = teams.create_team(actor=sam, name=TEAM)
    other = teams.create_team(actor=sam, name=OTHER_TEAM)
    people = {"sam": sam, "team": team, "other_team": other}
    for username, first, last, team_name, role in PEOPLE:
        user = users.create_user(username, password=PASSWORD, first_name=first, last_name=last)
        teams.add_member(actor=sam, team=team if team_name == TEAM else other, user=user,
                         role=role)
        people[username] = user
    return SimpleNamespace(**people)
