from django.apps import AppConfig


class InventoryConfig(AppConfig):
    """The physical record: sites, CTs, devices, wiring, isolation provisions, procedures."""

    name = "inventory"
    default_auto_field = "django.db.models.BigAutoField"
