"""Pure analyses: numpy/pandas in, frozen dataclass out. No database, no web."""
