"""Load the invented demo scenario into an empty database."""

from django.contrib.auth import get_user_model
from django.core.management.base import BaseCommand, CommandError
from django.db import transaction

DEMO_PASSWORD = "demo-pass-2026"  # documented in the README; demo data only
DEMO_USERS = [
    ("ana", "Ana Analyst", "analyst"),
    ("fred", "Fred Finance", "financial review"),
    ("olga", "Olga Operations", "operations"),
    ("bea", "Bea Budget", "budget holder"),
    ("vic", "Vic Viewer", "viewer"),
    ("omar", "Omar Outsider", "analyst (another team)"),
]


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
            for username, full_name, _role in DEMO_USERS:
                first, last = full_name.split(" ", 1)
                user_model.objects.create_user(
                    username, password=DEMO_PASSWORD, first_name=first, last_name=last
                )
        self._print_logins()

    def _print_logins(self):
        self.stdout.write(f"Demo logins (invented people; password for all: {DEMO_PASSWORD}):")
        for username, full_name, role in DEMO_USERS:
            self.stdout.write(f"  {username:6} {full_name:18} {role}")
