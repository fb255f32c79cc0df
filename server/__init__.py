"""Remanence: a registry and dashboard for molecular-ferroelectric campaigns."""

__version__ = "0.1.0"
