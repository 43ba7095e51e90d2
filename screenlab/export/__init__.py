"""Exports: shortlist tables, the next-round campaign folder, spreadsheet-safe text, decision drafts
(recorded by :mod:`screenlab.store.decisions`) and the self-contained HTML report."""
