"""``manage.py import_study_records SOURCE FILE.csv [--dry-run] [--as USERNAME]``.

Imports a study source's past studies from a CSV (columns ``date`` as
YYYY-MM-DD, ``signal``, ``state``; other columns ignored; see
``valuation.records_csv``) through the same service as the API upload: all or
nothing, every bad line reported with its number, one audit event recorded
under the register user given with ``--as`` (default: the login name in
``$USER``, when the register has such a user).

Exit codes: 0 imported (or checked, with ``--dry-run``); 2 bad input, with one
line per problem on stderr and nothing imported.
"""

from __future__ import annotations

import os

from django.contrib.auth import get_user_model
from django.core.management.base import BaseCommand, CommandError

from decisions.services import sources
from decisions.services.errors import DomainError
from valuation.records_csv import MAX_BYTES, MAX_ROWS

EXIT_INVALID = 2


def _fail(lines: list[str]) -> CommandError:
    return CommandError("\n".join(lines), returncode=EXIT_INVALID)


class Command(BaseCommand):
    help = "Import a study source's track record from a CSV file (all or nothing)."

    def add_arguments(self, parser):
        parser.add_argument("source", metavar="SOURCE", help="the source's id or exact name")
        parser.add_argument("file", metavar="FILE.csv", help="columns date, signal, state")
        parser.add_argument("--dry-run", action="store_true",
                            help="check the file and count its records; import nothing")
        parser.add_argument("--as", dest="username", metavar="USERNAME", default=None,
                            help="the register user the import is recorded under "
                                 "(default: $USER)")

    def handle(self, *args, source, file, dry_run=False, username=None, **options):
        actor = self._actor(username)
        found = self._source(actor, source)
        try:
            size = os.stat(file).st_size
        except OSError as exc:
            raise _fail([f"{file}: cannot be read ({exc.strerror})"]) from None
        if size > MAX_BYTES:
            # Refused from its size alone, before a byte is read.
            raise _fail([f"{file}: file: larger than {MAX_BYTES:,} bytes ({size:,} bytes); at "
                         f"most {MAX_ROWS:,} records per file, split the file and import it "
                         "in parts; nothing imported"])
        try:
            with open(file, "rb") as fh:
                summary = sources.import_records(actor=actor, source=found, file=fh,
                                                 dry_run=dry_run,
                                                 filename=os.path.basename(file))
        except DomainError as exc:
            lines = [f"{file}: {loc}: {msg}" if loc else f"{file}: {msg}"
                     for loc, msg in exc.problems]
            if not lines[-1].endswith("nothing imported"):
                lines.append("nothing imported")
            raise _fail(lines) from None
        except OSError as exc:
            raise _fail([f"{file}: cannot be read ({exc.strerror})"]) from None
        verb = "would import" if dry_run else "imported"
        self.stdout.write(f"{found.name}: {verb} {summary['records']} records "
                          f"({summary['first_date']} to {summary['last_date']}), "
                          f"file SHA-256 {summary['sha256']}")
        for state, row in summary["counts"].items():
            cells = ", ".join(f"{signal} {n}" for signal, n in row.items())
            self.stdout.write(f"  {state}: {cells}")

    def _actor(self, username):
        name = username or os.environ.get("USER") or os.environ.get("LOGNAME")
        user = get_user_model().objects.filter(username=name, is_active=True).first() if name \
            else None
        if user is None:
            raise _fail([f"--as: no active register user {name!r}; give --as USERNAME, the "
                         "analyst the import is recorded under" if name else
                         "--as: give --as USERNAME, the analyst the import is recorded under"])
        return user

    def _source(self, actor, ref: str):
        try:
            if ref.isdigit():
                return sources.get_source(actor, int(ref))
        except DomainError:
            pass
        matches = list(sources.visible_sources(actor).filter(name=ref).select_related("team"))
        if len(matches) == 1:
            return matches[0]
        if len(matches) > 1:
            teams = ", ".join(f"#{m.pk} in {m.team.name}" for m in matches)
            raise _fail([f"SOURCE: {ref!r} names several sources ({teams}); give the id"])
        raise _fail([f"SOURCE: no study source {ref!r} (id or exact name) among the teams of "
                     f"{actor.get_username()}"])
