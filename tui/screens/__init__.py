"""Screens of the bendwise app (imported lazily by the app, so the first frame stays light)."""
