from django.contrib import admin
from django.contrib.auth import views as auth_views
from django.urls import include, path
from drf_spectacular.views import SpectacularAPIView

from analytics.views import overview as overview_views

admin.site.site_header = "Barometer administration"
admin.site.site_title = "Barometer admin"
admin.site.index_title = "Projects, tokens, column maps and components"

urlpatterns = [
    # Signed-in people land on a project's "This week" page (the switcher sends ?project=<slug> here).
    path("", overview_views.home, name="home"),
    path("admin/", admin.site.urls),
    path("accounts/login/", auth_views.LoginView.as_view(), name="login"),
    path("accounts/logout/", auth_views.LogoutView.as_view(), name="logout"),
    path("api/schema/", SpectacularAPIView.as_view(), name="api-schema"),
    path("api/v1/", include("ingest.api.urls")),
    path("api/v1/", include("analytics.api.urls")),
    # Dashboard pages, per project.
    path("p/<slug:slug>/", include("analytics.views.overview")),
    path("p/<slug:slug>/flaky/", include("analytics.views.flaky")),
    path("p/<slug:slug>/causes/", include("analytics.views.causes")),
    path("p/<slug:slug>/forecasts/", include("analytics.views.forecasts")),
    path("p/<slug:slug>/imports/", include("ingest.views")),
]
