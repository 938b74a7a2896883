"""Shared test settings.

Hypothesis runs derandomized (the same examples on every run) so that CI results are repeatable;
set HYPOTHESIS_PROFILE=explore to search with fresh random examples locally.
"""
import os

from hypothesis import settings

settings.register_profile("repeatable", derandomize=True, deadline=None)
settings.register_profile("explore", deadline=None)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "repeatable"))

# reference implementations used only by tests (tests/reference/) and the browser helper
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
