"""Write the audit chain's head (sequence number and hash) to a file kept elsewhere."""

import json
from pathlib import Path

from django.core.management.base import BaseCommand, CommandError
from django.utils import timezone

from decisions.models import AuditEvent


class Command(BaseCommand):
    help = ("Record the head of the audit chain in FILE; keep it outside this database's reach "
            "and check it later with `verify_audit --checkpoint FILE`.")

    def add_arguments(self, parser):
        parser.add_argument("-o", "--output", required=True, metavar="FILE")

    def handle(self, *args, output, **options):
        last = AuditEvent.objects.order_by("-seq").values("seq", "hash").first()
        head = last or {"seq": 0, "hash": "0" * 64}
        mark = {"seq": head["seq"], "hash": head["hash"], "written_at": timezone.now().isoformat()}
        try:
            Path(output).write_text(json.dumps(mark, indent=1) + "\n", encoding="utf-8")
        except OSError as exc:
            raise CommandError(f"-o: cannot write {output}: {exc.strerror}") from None
        self.stdout.write(f"Checkpoint written to {output}: #{mark['seq']} {mark['hash']}")
