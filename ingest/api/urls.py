from django.urls import path

from ingest.api import views

urlpatterns = [
    path("projects/<slug:slug>/results/", views.ResultsUploadView.as_view(), name="api-results-upload"),
    path("projects/<slug:slug>/imports/<int:pk>/", views.ImportJobView.as_view(), name="api-import-job"),
]
