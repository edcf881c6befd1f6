"""Bring up a local register in one step: migrate, load the demo, serve."""

from django.core.management import call_command
from django.core.management.base import BaseCommand


class Command(BaseCommand):
    help = "Migrate the database, load the invented demo scenario if empty, and start the server."

    def add_arguments(self, parser):
        parser.add_argument("--addr", default="127.0.0.1:8000", help="address:port to serve on")
        parser.add_argument("--no-serve", action="store_true", help="prepare the database only")

    def handle(self, *args, addr, no_serve, **options):
        call_command("migrate", interactive=False, verbosity=0)
        call_command("load_demo", if_empty=True, stdout=self.stdout)
        self.stdout.write(self.style.SUCCESS(f"\nDecision register ready at http://{addr}/"))
        self.stdout.write("Sign in with one of the demo logins above (see README, 'Demo logins').")
        if not no_serve:
            call_command("runserver", addr, use_reloader=False)
