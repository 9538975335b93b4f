from django.apps import AppConfig


class AnalysisConfig(AppConfig):
    """Burdens, ratings, procedure checks and isolation plans: the engine (pure Python, in
    ``analysis/engine``), the adapters that feed it from the record, and the CLI."""

    name = "analysis"
    default_auto_field = "django.db.models.BigAutoField"
