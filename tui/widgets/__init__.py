"""Widgets and text pictures of the dashboard."""
