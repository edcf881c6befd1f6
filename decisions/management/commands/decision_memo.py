"""Write the decision memo of one version to a PDF file.

    python manage.py decision_memo ID [--version N] -o FILE.pdf

The command line has the database's own trust, so it is not scoped to a team.
The file appears whole or not at all (written beside the target, then renamed).
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from django.core.management.base import BaseCommand, CommandError

from decisions.services.errors import DomainError
from decisions.services.memo import memo_for_operator


class Command(BaseCommand):
    help = "Write the decision memo (PDF) of a decision's version; default: the current version."

    def add_base_argument(self, parser, *args, **kwargs):
        # Here ``--version N`` picks the model version (as the issue asks), so Django's
        # own ``--version`` (the framework's version number) is left out of this command.
        if "--version" in args:
            return
        super().add_base_argument(parser, *args, **kwargs)

    def add_arguments(self, parser):
        parser.add_argument("decision_id", type=int)
        parser.add_argument("--version", type=int, dest="number", metavar="N",
                            help="version number (default: the current version)")
        parser.add_argument("-o", "--output", required=True, metavar="FILE.pdf")

    def handle(self, *args, decision_id, number, output, **options):
        try:
            pdf, used = memo_for_operator(decision_id, number)
        except DomainError as exc:
            raise CommandError(str(exc)) from None
        target = Path(output)
        if not target.parent.is_dir():
            raise CommandError(f"--output: the folder {str(target.parent)!r} does not exist")
        fd, tmp = tempfile.mkstemp(dir=target.parent, prefix=".memo-", suffix=".pdf")
        try:
            with os.fdopen(fd, "wb") as fh:
                fh.write(pdf)
            os.replace(tmp, target)
        except BaseException:
            Path(tmp).unlink(missing_ok=True)
            raise
        self.stdout.write(f"wrote {target} (decision {decision_id}, version {used}, "
                          f"{len(pdf):,} bytes)")
