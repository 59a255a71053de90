import os
import sys

# make the test helper module ``reference`` importable
sys.path.insert(0, os.path.dirname(__file__))

import pytest
from hypothesis import settings

# Property tests run the same examples on every machine so CI is repeatable; set
# HYPOTHESIS_PROFILE=explore to search fresh random examples while developing.
settings.register_profile("repeatable", derandomize=True)
settings.register_profile("explore", derandomize=False)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "repeatable"))


@pytest.fixture
def inflate_own_errors(monkeypatch):
    """``inflate(module, factor)``: the engines' own error bounds as ``module`` reads them
    (its ``own_errors``) made ``factor`` x larger from then on, the solve already done:
    a check that relies on them must then refuse."""
    def inflate(module, factor):
        real = module.own_errors
        monkeypatch.setattr(module, "own_errors",
                            lambda s: {k: factor * v for k, v in real(s).items()})
    return inflate


@pytest.fixture
def modal_read(monkeypatch):
    """A Monte Carlo column read on its modal curve even where its curve cannot fall and
    ends below the level (the Laplace-alone reading of
    :func:`transport.site.laplace_checks.stays_below` turned off): for the tests of the
    modal scan and its checks."""
    from transport.site import boring

    monkeypatch.setattr(boring, "stays_below", lambda *args, **kwargs: None)
