"""Test configuration: property-based tests draw the same examples on every run."""

from hypothesis import settings

settings.register_profile("manybody", derandomize=True, print_blob=True)
settings.load_profile("manybody")
