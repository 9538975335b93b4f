from django.apps import AppConfig


class PagesConfig(AppConfig):
    """Server-rendered pages for planners and engineers (Django templates with htmx)."""

    name = "pages"
    verbose_name = "Planner pages"
