"""Walk the audit chain and report the first broken link (exit status 1 on any break)."""

from pathlib import Path

from django.core.management.base import BaseCommand, CommandError

from decisions.services.audit import read_checkpoint, verify_chain, verify_records
from decisions.services.audit_verify import DEFAULT_PROCESSES, SLICE_SIZE


class Command(BaseCommand):
    help = ("Check every audit event's link and hash, the chain head and, with --checkpoint, "
            "a head recorded earlier by audit_checkpoint; then check that every version's "
            "content and every sign-off still match the hashes the chain recorded. "
            "Exits non-zero on any break.")
    # The system checks would import every URL module (the PDF memo stack with them) for
    # a command that only reads the database: about a second of start-up, for nothing.
    # Django's own `shell` does without them too.
    requires_system_checks = ()

    def add_arguments(self, parser):
        parser.add_argument("--checkpoint", metavar="FILE",
                            help="a file written by audit_checkpoint; catches truncation")
        parser.add_argument("--processes", type=int, default=DEFAULT_PROCESSES, metavar="N",
                            help="walk the slices of a long chain in N processes at once "
                                 "(default: %(default)s)")
        parser.add_argument("--slice-size", type=int, default=SLICE_SIZE, metavar="EVENTS",
                            help="events per slice; a chain no longer than this is walked in "
                                 "one process (default: %(default)s)")

    def handle(self, *args, checkpoint=None, processes=DEFAULT_PROCESSES, slice_size=SLICE_SIZE,
               **options):
        for option, value in (("--processes", processes), ("--slice-size", slice_size)):
            if value < 1:
                raise CommandError(f"{option}: must be a whole number >= 1, got {value}")
        mark = None
        if checkpoint:
            try:
                mark = read_checkpoint(Path(checkpoint).read_text(encoding="utf-8"))
            except OSError as exc:
                raise CommandError(f"--checkpoint: cannot read {checkpoint}: {exc.strerror}") \
                    from None
            except ValueError as exc:
                raise CommandError(f"--checkpoint: {exc}") from None
        report = verify_chain(checkpoint=mark, processes=processes, slice_size=slice_size)
        if not report.ok:
            self.stderr.write(f"Audit chain BROKEN after {report.count} good event(s): "
                              f"{report.first_break}")
            raise SystemExit(1)
        records = verify_records()
        if records:
            for problem in records:
                self.stderr.write(f"Signed records BROKEN: {problem}")
            raise SystemExit(1)
        checked = f"; checkpoint #{mark['seq']} matches" if mark else ""
        self.stdout.write(self.style.SUCCESS(
            f"Audit chain intact: {report.count} event(s), head #{report.head_seq} "
            f"{report.head_hash}{checked}"))
