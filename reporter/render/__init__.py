"""Rendering: the Jinja environment, HTML and PDF."""
