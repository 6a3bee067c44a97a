from django.urls import path

from ingest.api import defects, views

urlpatterns = [
    path("projects/<slug:slug>/results/", views.ResultsUploadView.as_view(), name="api-results-upload"),
    path("projects/<slug:slug>/imports/<int:pk>/", views.ImportJobView.as_view(), name="api-import-job"),
    path("projects/<slug:slug>/defects/", defects.DefectUploadView.as_view(), name="api-defects-upload"),
    path(
        "projects/<slug:slug>/imports/<int:pk>/rejected.csv",
        defects.RejectedRowsCsvView.as_view(),
        name="api-import-rejected-csv",
    ),
    path(
        "projects/<slug:slug>/column-maps/<str:name>/",
        defects.ColumnMapView.as_view(),
        name="api-column-map",
    ),
]
