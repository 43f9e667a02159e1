from django.apps import AppConfig

from campaigns import messaging
from fleet import hooks


class CampaignsConfig(AppConfig):
    name = "campaigns"
    verbose_name = "Campaigns"
    default_auto_field = "django.db.models.BigAutoField"

    def ready(self) -> None:
        # The scheduler answers the two hooks that lower layers call without importing it: the services' request
        # to top up a campaign (campaigns.messaging) and the fleet's recovery sweep (fleet.hooks).
        from campaigns import scheduler  # deferred: scheduler imports the models, which load after apps.py

        messaging.register_dispatcher(scheduler.dispatch)
        hooks.register_sweep(scheduler.sweep)
