"""Delete the Idempotency-Key records older than IDEMPOTENCY_KEY_TTL_HOURS (run it daily)."""

from django.conf import settings
from django.core.management.base import BaseCommand

from decisions.services.idempotency import purge_expired


class Command(BaseCommand):
    help = ("Delete the Idempotency-Key records of POST /api/decisions/ older than "
            "IDEMPOTENCY_KEY_TTL_HOURS. They are ignored already; this keeps the table small.")

    def handle(self, *args, **options):
        count = purge_expired()
        self.stdout.write(f"Purged {count} idempotency key(s) older than "
                          f"{settings.IDEMPOTENCY_KEY_TTL_HOURS} hour(s).")
