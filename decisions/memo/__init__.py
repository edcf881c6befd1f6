"""The decision memo: a PDF committee pack and archive record, built from plain data.

``build.build_memo(memo_data)`` is pure (no database); the service
``decisions.services.memo`` gathers the data from the records and calls it.
"""
