"""The shortlist bundle: the shortlist files and the next-round campaign folder of the picked
candidates, as bytes (what the app's Shortlist page offers for download).

Pure: no Streamlit, no store. The caller hands in the analysis, its ranking and (optionally) the
store's import history; :func:`shortlist_bundle` writes :func:`screenlab.export.shortlist.write_shortlist`
and :func:`screenlab.export.nextround.design_next_round` into a temporary folder and reads them
back. The next round is zipped under one folder ``<campaign>-next-round/`` (its files in name
order, then ``NOTE.txt`` when a note is given).
"""
from __future__ import annotations

from dataclasses import dataclass

import pandas as pd


@dataclass(frozen=True)
class ShortlistBundle:
    """The shortlist as a table and as CSV / XLSX bytes, the next-round folder as a zip, and one
    sentence on the next round (plates, wells by role, files; '' without a layout)."""

    table: pd.DataFrame
    csv: bytes
    xlsx: bytes
    next_round_zip: bytes
    next_round_summary: str


def picked_rows(ranking: pd.DataFrame, picked) -> pd.DataFrame:
    """The ranked rows of the ``picked`` catalysts and of the benchmark (for comparison), in
    ranking order; unrankable rows left out."""
    chosen = ranking[ranking["catalyst"].astype(str).isin(list(picked)) | (ranking["role"].astype(str) == "reference")]
    return chosen[chosen["rank"].notna()]


def next_round_summary(layout: pd.DataFrame, files) -> str:
    """``Next round: N plate(s), <count> <role>, ... wells; files: a, b.`` of a next-round layout."""
    roles = layout["role"].astype(str).value_counts()
    return (f"Next round: {layout['plate'].nunique()} plate(s), "
            + ", ".join(f"{int(n)} {role}" for role, n in roles.items())
            + f" wells; files: {', '.join(p.name for p in files)}.")


def shortlist_bundle(analysis, ranking: pd.DataFrame, picked, *, campaign: str, metric: str,
                     temperature_c: float | None, top_k: int, note: str = "", decision: int | None = None,
                     enantiomer: str | None = None, require: tuple[str, ...] = (),
                     imports: pd.DataFrame | None = None,
                     import_files: pd.DataFrame | None = None) -> ShortlistBundle:
    """The shortlist of the ``picked`` catalysts (in ranking order, the benchmark added) and their
    next-round campaign folder, as bytes.

    ``analysis``: :func:`screenlab.pipeline.analyse` of the campaign; ``ranking``: its
    :func:`screenlab.stats.ranking.rank_candidates` under ``metric``, ``temperature_c``, ``top_k``,
    ``enantiomer`` and ``require`` (recorded in the provenance with ``note``, the picks and the
    ranking's order and Monte Carlo draws); ``decision``: the recorded decision these picks are
    (its number goes into the next round's campaign.toml and the provenance); ``imports`` /
    ``import_files``: the store's import history of the campaign.
    """
    import io
    import tempfile
    import zipfile
    from pathlib import Path

    from screenlab.export.nextround import design_next_round
    from screenlab.export.shortlist import write_shortlist

    picked = tuple(picked)
    chosen = picked_rows(ranking, picked)
    n_picked = int((chosen["role"].astype(str) != "reference").sum())
    mc = ranking.attrs.get("monte_carlo") or {}
    options = {"metric": metric, "temperature_c": temperature_c, "top_k": top_k, "note": note,
               "picked": ";".join(picked), "decision": decision, "enantiomer": enantiomer or "",
               "require": ";".join(require), "order": ranking.attrs.get("direction", ""),
               "draws": mc.get("draws", ""), "mc_se": mc.get("mc_se", "")}
    with tempfile.TemporaryDirectory(prefix="screenlab-shortlist-") as tmp:
        out = write_shortlist(Path(tmp) / "shortlist", chosen, analysis.kinetics, campaign=campaign,
                              top_k=max(1, n_picked), catalysts=analysis.data.catalysts, quality=analysis.quality,
                              imports=imports, import_files=import_files, options=options)
        table = pd.read_csv(out["csv"]) if "csv" in out else pd.DataFrame()
        csv = Path(out["csv"]).read_bytes()
        xlsx = Path(out["xlsx"]).read_bytes()
        nr_name = f"{campaign}-next-round"
        folder = Path(design_next_round(Path(tmp) / nr_name, analysis.data, list(picked), name=nr_name,
                                        decision=decision))
        buf = io.BytesIO()
        files = sorted(p for p in folder.rglob("*") if p.is_file())
        with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
            for p in files:
                zf.write(p, f"{nr_name}/{p.relative_to(folder).as_posix()}")
            if note.strip():
                zf.writestr(f"{nr_name}/NOTE.txt", note.strip() + "\n")
        layout = folder / "layout.csv"
        summary = next_round_summary(pd.read_csv(layout), files) if layout.is_file() else ""
    return ShortlistBundle(table=table, csv=csv, xlsx=xlsx, next_round_zip=buf.getvalue(), next_round_summary=summary)
