"""Dataset export tests (the datasets app: export, its commands and view)."""
