from django.apps import AppConfig


class DecisionsConfig(AppConfig):
    name = "decisions"
    verbose_name = "Decision register"
    default_auto_field = "django.db.models.BigAutoField"
