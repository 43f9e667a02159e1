"""Dataset export tests (campaigns/export.py and its commands and view)."""
