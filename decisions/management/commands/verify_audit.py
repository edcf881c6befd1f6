"""Walk the audit chain and report the first broken link (exit status 1 on any break)."""

from pathlib import Path

from django.core.management.base import BaseCommand, CommandError

from decisions.services.audit import read_checkpoint, verify_chain, verify_records


class Command(BaseCommand):
    help = ("Check every audit event's link and hash, the chain head and, with --checkpoint, "
            "a head recorded earlier by audit_checkpoint; then check that every version's "
            "content and every sign-off still match the hashes the chain recorded. "
            "Exits non-zero on any break.")

    def add_arguments(self, parser):
        parser.add_argument("--checkpoint", metavar="FILE",
                            help="a file written by audit_checkpoint; catches truncation")

    def handle(self, *args, checkpoint=None, **options):
        mark = None
        if checkpoint:
            try:
                mark = read_checkpoint(Path(checkpoint).read_text(encoding="utf-8"))
            except OSError as exc:
                raise CommandError(f"--checkpoint: cannot read {checkpoint}: {exc.strerror}") \
                    from None
            except ValueError as exc:
                raise CommandError(f"--checkpoint: {exc}") from None
        report = verify_chain(checkpoint=mark)
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
