import django.db.models.deletion
from django.db import migrations, models


def assign_personal_teams(apps, schema_editor):
    """Existing campaigns go to their owner's personal team, where the owner is admin."""
    Campaign = apps.get_model("campaigns", "Campaign")
    Team = apps.get_model("teams", "Team")
    Membership = apps.get_model("teams", "Membership")
    for campaign in Campaign.objects.filter(team__isnull=True).select_related("owner"):
        team, _ = Team.objects.get_or_create(name=f"{campaign.owner.username} (personal)")
        Membership.objects.get_or_create(team=team, user=campaign.owner, defaults={"role": "admin"})
        campaign.team = team
        campaign.save(update_fields=["team"])


class Migration(migrations.Migration):
    dependencies = [
        ("campaigns", "0001_initial"),
        ("teams", "0001_initial"),
    ]

    operations = [
        migrations.AddField(
            model_name="campaign",
            name="team",
            field=models.ForeignKey(null=True, on_delete=django.db.models.deletion.PROTECT, related_name="campaigns",
                                    to="teams.team"),
        ),
        migrations.RunPython(assign_personal_teams, migrations.RunPython.noop),
        migrations.AlterField(
            model_name="campaign",
            name="team",
            field=models.ForeignKey(on_delete=django.db.models.deletion.PROTECT, related_name="campaigns",
                                    to="teams.team"),
        ),
        migrations.AlterField(model_name="campaign", name="name", field=models.CharField(max_length=200)),
        migrations.AddConstraint(
            model_name="campaign",
            constraint=models.UniqueConstraint(fields=("team", "name"), name="campaign_unique_name_per_team"),
        ),
        migrations.AddField(
            model_name="asset",
            name="team",
            field=models.ForeignKey(blank=True, help_text="Owning team; empty for the shared procedural library",
                                    null=True, on_delete=django.db.models.deletion.PROTECT, related_name="assets",
                                    to="teams.team"),
        ),
    ]
