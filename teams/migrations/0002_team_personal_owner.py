import django.db.models.deletion
from django.conf import settings
from django.db import migrations, models


def mark_personal_teams(apps, schema_editor):
    """Teams made by the old name-keyed ``personal_team`` get their owner.

    Such a team is named "<username> (personal)" and has that user as an admin (both ``personal_team`` and
    campaigns' migration 0002 made it so). A team of that name without that admin was never a personal team.
    """
    Team = apps.get_model("teams", "Team")
    Membership = apps.get_model("teams", "Membership")
    suffix = " (personal)"
    for team in Team.objects.filter(name__endswith=suffix, personal_owner__isnull=True):
        username = team.name[: -len(suffix)]
        admin = (Membership.objects.filter(team=team, role="admin", user__username=username)
                 .select_related("user").first())
        if admin is not None and not Team.objects.filter(personal_owner=admin.user).exists():
            team.personal_owner = admin.user
            team.save(update_fields=["personal_owner"])


class Migration(migrations.Migration):

    dependencies = [
        ('teams', '0001_initial'),
        # campaigns 0002 made the first personal teams (by name): mark them after it ran.
        ('campaigns', '0002_teams'),
        migrations.swappable_dependency(settings.AUTH_USER_MODEL),
    ]

    operations = [
        migrations.AddField(
            model_name='team',
            name='personal_owner',
            field=models.OneToOneField(blank=True, editable=False, null=True,
                                       on_delete=django.db.models.deletion.SET_NULL, related_name='personal_team',
                                       to=settings.AUTH_USER_MODEL),
        ),
        migrations.RunPython(mark_personal_teams, migrations.RunPython.noop),
    ]
