"""Routes of the planner pages (mounted at the site root)."""

from django.contrib.auth import views as auth_views
from django.urls import path

from pages.views import builder, cts, devices, procedures, sites, worksheets

app_name = "pages"

site = "sites/<str:site>/"

urlpatterns = [
    path(
        "login/",
        auth_views.LoginView.as_view(template_name="pages/login.html"),
        name="login",
    ),
    path("logout/", auth_views.LogoutView.as_view(), name="logout"),
    path("", sites.home, name="home"),
    path(site, sites.site_page, name="site"),
    path(f"{site}cts/<str:code>/", cts.ct_page, name="ct"),
    path(f"{site}cts/<str:code>/plot/<str:name>.svg", cts.ct_plot, name="ct-plot"),
    path(f"{site}devices/<str:code>/", devices.device_page, name="device"),
    path(f"{site}devices/<str:code>/save-plan/", devices.device_save_plan, name="device-save"),
    path(
        f"{site}devices/<str:code>/plan/steps/<int:step>/drawing/",
        devices.device_plan_step_drawing,
        name="device-plan-step-drawing",
    ),
    path(
        f"{site}devices/<str:code>/worksheet.pdf",
        worksheets.device_worksheet,
        name="device-worksheet",
    ),
    path(f"{site}builder/", builder.builder_new, name="builder"),
    path(f"{site}procedures/<str:code>/", procedures.procedure_page, name="procedure"),
    path(
        f"{site}procedures/<str:code>/steps/<int:step>/drawing/",
        procedures.procedure_step_drawing,
        name="procedure-step-drawing",
    ),
    path(f"{site}procedures/<str:code>/builder/", builder.builder_edit, name="builder-edit"),
    path(
        f"{site}procedures/<str:code>/worksheet.pdf",
        worksheets.procedure_worksheet,
        name="procedure-worksheet",
    ),
]
