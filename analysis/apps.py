from django.apps import AppConfig


class AnalysisConfig(AppConfig):
    """Burdens, ratings, procedure checks and isolation plans: the engine (pure Python, in
    ``analysis/engine``), the adapters that feed it from the record, and the CLI."""

    name = "analysis"
    default_auto_field = "django.db.models.BigAutoField"

    def ready(self) -> None:
        # The inventory never imports the analysis: it records each change of the record in
        # its outbox and hands the row to the consumers registered here, in the edit's
        # transaction; ours sends the recompute when that transaction commits.
        from analysis.services import site_change_consume
        from inventory.changes import consumer_register

        consumer_register(site_change_consume)
