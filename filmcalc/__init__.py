"""filmcalc: thin-film thickness from interference colour."""
__version__ = "0.1.0"
