"""The exception handler: races and a busy database never surface as 500."""

from django.db import IntegrityError, OperationalError

from decisions.api.exceptions import api_exception_handler, flatten


def test_a_unique_constraint_race_answers_409():
    response = api_exception_handler(IntegrityError("duplicate key"), {})
    assert response.status_code == 409 and response.data["code"] == "conflict"


def test_a_locked_sqlite_database_answers_503_with_retry_after():
    response = api_exception_handler(OperationalError("database is locked"), {})
    assert response.status_code == 503 and response["Retry-After"] == "1"


def test_other_database_errors_are_not_swallowed():
    assert api_exception_handler(OperationalError("disk I/O error"), {}) is None


def test_nested_validation_detail_is_flattened_with_locations():
    detail = {"document": {"states": [{"probability": ["bad"]}]}, "non_field_errors": ["x"]}
    assert flatten(detail) == [
        {"location": "document.states[0].probability", "message": "bad"},
        {"location": "", "message": "x"},
    ]
