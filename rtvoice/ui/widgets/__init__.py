"""Widgets of the terminal UI, each with one job."""
