"""Turning a request into the core's arguments: items and vectors, the preference model, panels
and household rows from JSON or CSV, and the one locator that points core errors back at the
request's fields."""
