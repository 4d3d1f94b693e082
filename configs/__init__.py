"""Bundled study files (the demo study)."""
