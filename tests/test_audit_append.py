"""append_event refuses to run outside a transaction (no database needed to check it)."""

import pytest

from decisions.services.audit import append_event


def test_append_outside_a_transaction_is_refused():
    with pytest.raises(RuntimeError, match=r"inside transaction\.atomic\(\)"):
        append_event(actor=None, action="x", object_type="x", object_id=1, payload={})
