"""URL routes: the admin and the versioned REST API."""

from django.contrib import admin
from django.urls import include, path

admin.site.site_header = "Loopkeep"
admin.site.site_title = "Loopkeep"
admin.site.index_title = "CT circuits: the record and its results"

urlpatterns = [
    path("admin/", admin.site.urls),
    path("api/v1/", include("api.urls")),
]
