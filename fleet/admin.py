from django.contrib import admin

from fleet.models import WorkerHeartbeat


@admin.register(WorkerHeartbeat)
class WorkerHeartbeatAdmin(admin.ModelAdmin):
    list_display = ("hostname", "machine", "pid", "concurrency", "renderer_variant", "last_seen", "stopped_at")
    readonly_fields = [f.name for f in WorkerHeartbeat._meta.fields]
