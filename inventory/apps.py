from django.apps import AppConfig
from django.core import checks


class InventoryConfig(AppConfig):
    """The physical record: sites, CTs, devices, wiring, isolation provisions, procedures."""

    name = "inventory"
    default_auto_field = "django.db.models.BigAutoField"

    def ready(self) -> None:
        # The demo login is made by this app's load_demo; `check --deploy` refuses it in
        # production (config.accounts says where else it is refused).
        from config.accounts import check_demo_account

        checks.register(check_demo_account, checks.Tags.security, deploy=True)
