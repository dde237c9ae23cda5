"""Composition and people: the command line, the dashboard, reports."""
