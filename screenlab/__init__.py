"""ScreenLab: catalyst screening analysis.

The public Python API (see README "Python API"):

>>> import screenlab as sl                                  # doctest: +SKIP
>>> data = sl.read_campaign("demo_campaign/aldol-2026")     # doctest: +SKIP
>>> result = sl.analyse(data)                               # doctest: +SKIP
>>> result.rates.head()                                     # doctest: +SKIP
"""
from __future__ import annotations

__version__ = "0.1.0"
