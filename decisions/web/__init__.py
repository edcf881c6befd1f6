"""Browser face: forms validate, views call services."""
