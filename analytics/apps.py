from django.apps import AppConfig


class AnalyticsConfig(AppConfig):
    name = "analytics"
    verbose_name = "Analytics: flaky tests, failure causes, forecasts"
