"""Test configuration: property tests are derandomised so every run checks the same cases."""

from hypothesis import settings

settings.register_profile("filmcalc", derandomize=True, deadline=None, print_blob=True)
settings.load_profile("filmcalc")
