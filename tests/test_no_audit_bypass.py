"""No write path skips the audit: services, API and commands use no bulk or queryset writes."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
# The register's write paths (other modules answer for their own, e.g. sources.py).
SCANNED = ["decisions/services/decisions.py", "decisions/services/signoff.py",
           "decisions/services/teams.py", "decisions/services/audit.py",
           "decisions/services/locking.py", "decisions/api/views.py",
           "decisions/api/views_extra.py", "decisions/admin.py",
           "decisions/management/commands/load_demo.py"]
# .update( on a queryset, bulk_create/bulk_update, raw SQL writes.
BYPASS = re.compile(r"\.(update|bulk_create|bulk_update|raw)\(|\.objects\.[a-z_]*\.delete\(")


def test_no_bulk_or_queryset_writes_in_the_write_paths():
    offenders = []
    for entry in SCANNED:
        path = ROOT / entry
        for file in [path] if path.is_file() else sorted(path.rglob("*.py")):
            for number, line in enumerate(file.read_text(encoding="utf-8").splitlines(), 1):
                if BYPASS.search(line) and "dict.update" not in line:
                    offenders.append(f"{file.relative_to(ROOT)}:{number}: {line.strip()}")
    assert offenders == []
