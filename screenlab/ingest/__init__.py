"""Import of campaign folders: read, validate, convert to canonical units.

The contract is docs/campaign-format.md (also summarised in the README). Public API:

* :func:`read_campaign` (folder, .zip, campaign.toml path or ``dict`` of uploaded files) ->
  :class:`ReadResult` (``data`` a :class:`~screenlab.model.CampaignData`, ``files`` one
  :class:`FileRecord` per file read, ``source``, ``notes``), or a
  :class:`~screenlab.errors.ValidationError` listing every problem;
* :func:`find_campaigns` the campaigns under a folder;
* :func:`extract_zip` safe unzipping (also for the app's uploads).
"""
from __future__ import annotations

from .reader import FileRecord, ReadResult, read_campaign
from .sources import (MAX_COMPRESSION_RATIO, MAX_UNCOMPRESSED_BYTES, MAX_ZIP_ENTRIES, extract_zip,
                      find_campaigns)

__all__ = [
    "FileRecord", "ReadResult", "read_campaign", "find_campaigns", "extract_zip",
    "MAX_ZIP_ENTRIES", "MAX_UNCOMPRESSED_BYTES", "MAX_COMPRESSION_RATIO",
]
