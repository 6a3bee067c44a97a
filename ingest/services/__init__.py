"""Write-side business logic of the ingest app (services), split by sub-domain."""
