"""The lesson page's template, style sheet and script (package data)."""
