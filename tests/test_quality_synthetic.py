"""No tests here any more: the plate-quality tests are in tests/test_quality.py and the simulated
campaign builder is the ``quality_campaign`` fixture of tests/conftest.py.

Kept only because tests/test_ranking.py (being changed by others) still imports ``make_campaign``
from this module; remove it once that import is the fixture.
"""
from conftest import _make_quality_campaign as make_campaign  # noqa: F401
