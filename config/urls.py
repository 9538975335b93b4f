"""URL routes: liveness and readiness, the admin, the versioned REST API and the planner pages
(at the root)."""

from django.contrib import admin
from django.urls import include, path

from config import health

admin.site.site_header = "Loopkeep"
admin.site.site_title = "Loopkeep"
admin.site.index_title = "CT circuits: the record and its results"

urlpatterns = [
    path("health/", health.health, name="health"),
    path("ready/", health.ready, name="ready"),
    path("admin/", admin.site.urls),
    path("api/v1/", include("api.urls")),
    path("", include("pages.urls")),
]
