"""The invented demo campaign (see load.py)."""
