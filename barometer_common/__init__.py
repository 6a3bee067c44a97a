"""Small helpers shared by every Barometer app (pure Python, no Django)."""
