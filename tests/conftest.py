import os
import sys

# make the test helper module ``reference`` importable
sys.path.insert(0, os.path.dirname(__file__))

from hypothesis import settings

# Property tests run the same examples on every machine so CI is repeatable; set
# HYPOTHESIS_PROFILE=explore to search fresh random examples while developing.
settings.register_profile("repeatable", derandomize=True)
settings.register_profile("explore", derandomize=False)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "repeatable"))
