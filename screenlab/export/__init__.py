"""Exports: shortlist tables, the next-round campaign folder, spreadsheet-safe text."""
