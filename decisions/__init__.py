"""The decision register: Django project and app (models, services, API, pages, memo)."""
