"""Every SQL statement of the store, in one place.

Values always travel as ``?`` parameters or as registered DataFrames (the ``incoming_*`` names
below are registered by :mod:`screenlab.store.writer` and :mod:`screenlab.store.connection` for
the duration of one statement); no SQL text is ever built from data.
"""
from __future__ import annotations

# --- schema bookkeeping -----------------------------------------------------------------------

CREATE_MIGRATIONS = """
CREATE TABLE IF NOT EXISTS schema_migrations (
    version INTEGER NOT NULL,
    name VARCHAR NOT NULL,
    applied_at TIMESTAMP NOT NULL
)"""
APPLIED_VERSIONS = "SELECT version FROM schema_migrations ORDER BY version"
RECORD_MIGRATION = "INSERT INTO schema_migrations VALUES (?, ?, now()::TIMESTAMP)"
UPSERT_META = "INSERT OR REPLACE INTO metadata VALUES (?, ?)"
#: several metadata entries in one statement: parameters are the list of keys and the list of values
UPSERT_META_MANY = "INSERT OR REPLACE INTO metadata SELECT unnest(?::VARCHAR[]), unnest(?::VARCHAR[])"
GET_META = "SELECT value FROM metadata WHERE key = ?"
ALL_META = "SELECT key, value FROM metadata ORDER BY key"
#: the store's write generation bumped and the 'last_written_by' entry (the parameter) set, in one statement
BUMP_GENERATION_WRITTEN_BY = """
INSERT OR REPLACE INTO metadata
SELECT 'generation', CAST(coalesce(max(CAST(value AS BIGINT)), 0) + 1 AS VARCHAR)
FROM metadata WHERE key = 'generation'
UNION ALL SELECT 'last_written_by', ?"""
LIBRARY_VERSION = "SELECT library_version FROM pragma_version()"
STORAGE_VERSION = "SELECT tags['storage_version'] FROM duckdb_databases() WHERE database_name = current_database()"
LOADED_EXTENSIONS = "SELECT extension_name FROM duckdb_extensions() WHERE loaded ORDER BY extension_name"
CHECKPOINT = "CHECKPOINT"
#: a large import's commit checkpoints straight into the database file (DuckDB checkpoints at commit
#: when the changes exceed the threshold) instead of writing the rows to the WAL and again at CHECKPOINT
COMMIT_INTO_FILE = "SET checkpoint_threshold = '1KB'"
DEFAULT_CHECKPOINT_THRESHOLD = "RESET checkpoint_threshold"

# --- reads of the current state ---------------------------------------------------------------

CAMPAIGN_NAMES = "SELECT campaign FROM current_campaigns ORDER BY campaign"
CURRENT_HEADER = "SELECT * FROM current_campaigns WHERE campaign = ?"
CURRENT_CATALYSTS = """
SELECT catalyst, name, family, molar_mass_g_mol, sites_per_unit, metal_wt_pct,
       metal_molar_mass_g_mol, dispersion, alias
FROM current_catalysts WHERE campaign = ? ORDER BY seq"""
CURRENT_PLATE_FINGERPRINTS = "SELECT plate, fingerprint, import_id FROM current_plates WHERE campaign = ?"
CURRENT_PLATES = """
SELECT plate, format, n_rows, n_cols, temperature_c, run_date, notes
FROM current_plates WHERE campaign = ? ORDER BY import_id, seq"""
CURRENT_WELLS = """
SELECT w.plate, w.import_id, w.seq, w.well, w."row", w.col, w.role, w.catalyst, w.loading,
       w.loading_unit, w.substrate_conc_mM, w.volume_uL, w.temperature_c
FROM current_wells w JOIN current_plates p ON p.campaign = w.campaign AND p.plate = w.plate
WHERE w.campaign = ? ORDER BY p.import_id, p.seq, w.seq"""
CURRENT_FACTORS = """
SELECT plate, import_id, seq, factor, value FROM current_well_factors WHERE campaign = ?"""
CURRENT_READINGS = """
SELECT r.plate, r.well, r.analyte, r.time_h, r.value
FROM current_readings r JOIN current_plates p ON p.campaign = r.campaign AND p.plate = r.plate
WHERE r.campaign = ? ORDER BY p.import_id, p.seq, r.seq"""

CAMPAIGNS_SUMMARY = """
WITH pl AS (SELECT campaign, count(*) AS plates FROM current_plates GROUP BY campaign),
     we AS (SELECT campaign, count(*) AS wells FROM current_wells GROUP BY campaign),
     re AS (SELECT campaign, count(*) AS readings, count(DISTINCT analyte) AS analytes
            FROM current_readings GROUP BY campaign),
     ca AS (SELECT campaign, count(*) AS catalysts FROM current_catalysts GROUP BY campaign),
     im AS (SELECT campaign, min(imported_at) AS imported_at, max(imported_at) AS updated_at,
                   count(*) AS imports
            FROM imports GROUP BY campaign)
SELECT h.campaign, h.description, h.readout_kind,
       json_extract_string(h.manifest_json, '$.parent') AS parent,
       TRY_CAST(json_extract_string(h.manifest_json, '$.decision') AS BIGINT) AS parent_decision,
       coalesce(pl.plates, 0) AS plates, coalesce(we.wells, 0) AS wells,
       coalesce(re.readings, 0) AS readings, coalesce(ca.catalysts, 0) AS catalysts,
       coalesce(re.analytes, 0) AS analytes,
       im.imported_at, im.updated_at, coalesce(im.imports, 0) AS imports
FROM current_campaigns h
LEFT JOIN pl USING (campaign) LEFT JOIN we USING (campaign) LEFT JOIN re USING (campaign)
LEFT JOIN ca USING (campaign) LEFT JOIN im USING (campaign)
ORDER BY h.campaign"""

IMPORTS_ALL = """
SELECT i.import_id, i.campaign, i.imported_at, i.source, i.status, i.plates_added,
       i.plates_replaced, i.plates_unchanged, i.catalysts_added, i.catalysts_replaced,
       i.manifest_replaced, i.n_wells, i.n_readings, coalesce(f.files, 0) AS files, i.message
FROM imports i
LEFT JOIN (SELECT import_id, count(*) AS files FROM import_files GROUP BY import_id) f USING (import_id)
WHERE ? IS NULL OR i.campaign = ?
ORDER BY i.import_id"""
IMPORT_FILES = """
SELECT i.import_id, i.campaign, f.name, f.sha256, f.n_rows
FROM import_files f JOIN imports i USING (import_id)
WHERE ? IS NULL OR i.campaign = ?
ORDER BY f.import_id, f.seq"""
NEXT_IMPORT_ID = "SELECT coalesce(max(import_id), 0) + 1 FROM imports"
TABLE_COUNTS = """
SELECT (SELECT count(*) FROM campaigns), (SELECT count(*) FROM catalysts), (SELECT count(*) FROM plates),
       (SELECT count(*) FROM wells), (SELECT count(*) FROM well_factors), (SELECT count(*) FROM readings),
       (SELECT count(*) FROM imports), (SELECT count(*) FROM import_files),
       (SELECT count(*) FROM decisions), (SELECT count(*) FROM decision_catalysts)"""

# --- readings added to stored plates (screenlab.store.addreadings) -------------------------------

#: every current plate of every campaign with its stored readings and its non-empty wells
PLATE_READING_COUNTS = """
WITH re AS (SELECT campaign, plate, count(*) AS n FROM current_readings GROUP BY campaign, plate),
     we AS (SELECT campaign, plate, count(*) FILTER (WHERE role IS DISTINCT FROM 'empty') AS n
            FROM current_wells GROUP BY campaign, plate)
SELECT p.campaign, p.plate, p.format, p.temperature_c, coalesce(we.n, 0) AS wells,
       coalesce(re.n, 0) AS readings, p.seq, p.import_id
FROM current_plates p
LEFT JOIN re ON re.campaign = p.campaign AND re.plate = p.plate
LEFT JOIN we ON we.campaign = p.campaign AND we.plate = p.plate
WHERE ? IS NULL OR p.campaign = ?
ORDER BY p.campaign, p.import_id, p.seq"""

# --- fingerprint upgrade: every stored plate version (current and superseded), keyed by
# (campaign, plate, import_id); see connection.refresh_fingerprints ---------------------------

ALL_PLATE_VERSIONS = """
SELECT campaign, plate, import_id, format, n_rows, n_cols, temperature_c, run_date, notes
FROM plates ORDER BY campaign, plate, import_id"""
ALL_WELL_VERSIONS = """
SELECT campaign, plate, import_id, well, "row", col, role, catalyst, loading, loading_unit,
       substrate_conc_mM, volume_uL, temperature_c
FROM wells"""
ALL_FACTOR_VERSIONS = "SELECT campaign, plate, import_id, well, factor, value FROM well_factors"
ALL_READING_VERSIONS = "SELECT campaign, plate, import_id, well, analyte, time_h, value FROM readings"
UPDATE_FINGERPRINTS = """
UPDATE plates SET fingerprint = n.fingerprint
FROM incoming_fingerprints n
WHERE plates.campaign = n.campaign AND plates.plate = n.plate AND plates.import_id = n.import_id"""

# --- writes (one import = one transaction) ----------------------------------------------------

SUPERSEDE_HEADER = "UPDATE campaigns SET superseded_by = ? WHERE campaign = ? AND superseded_by IS NULL"
SUPERSEDE_PLATES = """
UPDATE plates SET superseded_by = ?
WHERE campaign = ? AND superseded_by IS NULL AND plate IN (SELECT plate FROM incoming_plate_names)"""

INSERT_IMPORT = """
INSERT INTO imports VALUES (?, ?, ?, ?, ?, ?::VARCHAR[], ?::VARCHAR[], ?::VARCHAR[], ?::VARCHAR[],
                            ?::VARCHAR[], ?, ?, ?, ?, ?, ?)"""
INSERT_HEADER = """
INSERT INTO campaigns VALUES (?, ?, NULL, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?::VARCHAR[], ?::VARCHAR[],
                              ?, ?, ?, ?::VARCHAR[], ?)"""

#: bulk inserts: table name -> INSERT ... SELECT from the registered frame ``incoming_<table>``.
#: The campaign and import id, the same on every row of one import, are the parameters
#: ``$campaign`` and ``$import_id`` (not columns of the frame, which would repeat them per row);
#: import_files has no campaign column and takes its import id from the frame.
BULK_INSERT = {
    "import_files": """
INSERT INTO import_files (import_id, seq, name, sha256, n_rows)
SELECT import_id, seq, name, sha256, n_rows FROM incoming_import_files""",
    "catalysts": """
INSERT INTO catalysts (campaign, import_id, seq, catalyst, name, family, molar_mass_g_mol, sites_per_unit,
                       metal_wt_pct, metal_molar_mass_g_mol, dispersion, alias)
SELECT $campaign::VARCHAR, $import_id::BIGINT, seq, catalyst, name, family, molar_mass_g_mol, sites_per_unit,
       metal_wt_pct, metal_molar_mass_g_mol, dispersion, alias FROM incoming_catalysts""",
    "plates": """
INSERT INTO plates (campaign, plate, import_id, superseded_by, seq, fingerprint, format, n_rows, n_cols,
                    temperature_c, run_date, notes)
SELECT $campaign::VARCHAR, plate, $import_id::BIGINT, NULL, seq, fingerprint, format, n_rows, n_cols, temperature_c,
       run_date, notes FROM incoming_plates""",
    "wells": """
INSERT INTO wells (campaign, plate, import_id, seq, well, "row", col, role, catalyst, loading, loading_unit,
                   substrate_conc_mM, volume_uL, temperature_c)
SELECT $campaign::VARCHAR, plate, $import_id::BIGINT, seq, well, "row", col, role, catalyst, loading, loading_unit,
       substrate_conc_mM, volume_uL, temperature_c FROM incoming_wells""",
    "well_factors": """
INSERT INTO well_factors (campaign, plate, import_id, seq, well, factor, value)
SELECT $campaign::VARCHAR, plate, $import_id::BIGINT, seq, well, factor, value FROM incoming_well_factors""",
    "readings": """
INSERT INTO readings (campaign, plate, import_id, seq, well, analyte, time_h, value)
SELECT $campaign::VARCHAR, plate, $import_id::BIGINT, seq, well, analyte, time_h, value FROM incoming_readings""",
}
