from django.apps import AppConfig


class ApiConfig(AppConfig):
    """The REST API (versioned under /api/v1/)."""

    name = "api"
    default_auto_field = "django.db.models.BigAutoField"
