-- ScreenLab store, schema version 1.
-- Versioned rows: every data row carries the import that wrote it (import_id). A campaign
-- header (manifest + catalyst set + factor names) and each plate (plate row + layout + factors +
-- readings) are versions; a replaced version gets superseded_by = the replacing import and stays
-- in the store. Current rows are those whose header / plate version has superseded_by IS NULL.
-- Keys are kept minimal on purpose (DuckDB cannot alter tables that carry indexes or keys).

CREATE TABLE metadata (
    key VARCHAR PRIMARY KEY,
    value VARCHAR
);

CREATE TABLE imports (
    import_id BIGINT NOT NULL,
    campaign VARCHAR NOT NULL,
    imported_at TIMESTAMP NOT NULL,
    source VARCHAR,
    status VARCHAR NOT NULL,
    plates_added VARCHAR[],
    plates_replaced VARCHAR[],
    plates_unchanged VARCHAR[],
    catalysts_added VARCHAR[],
    catalysts_replaced VARCHAR[],
    manifest_replaced BOOLEAN NOT NULL,
    n_wells BIGINT NOT NULL,
    n_readings BIGINT NOT NULL,
    message VARCHAR,
    screenlab_version VARCHAR,
    duckdb_version VARCHAR
);

CREATE TABLE import_files (
    import_id BIGINT NOT NULL,
    seq INTEGER NOT NULL,
    name VARCHAR NOT NULL,
    sha256 VARCHAR,
    n_rows BIGINT
);

CREATE TABLE campaigns (
    campaign VARCHAR NOT NULL,
    import_id BIGINT NOT NULL,
    superseded_by BIGINT,
    fingerprint VARCHAR NOT NULL,
    description VARCHAR,
    reaction VARCHAR,
    readout_kind VARCHAR,
    readout_scale VARCHAR,
    product_per_substrate DOUBLE,
    epsilon_M_cm DOUBLE,
    path_length_cm DOUBLE,
    time_unit VARCHAR,
    concentration_unit VARCHAR,
    volume_unit VARCHAR,
    analyte_main VARCHAR,
    byproducts VARCHAR[],
    enantiomers VARCHAR[],
    analysis_json VARCHAR,
    manifest_json VARCHAR NOT NULL,
    manifest_toml VARCHAR,
    factor_names VARCHAR[],
    frame_schema_json VARCHAR NOT NULL
);

CREATE TABLE catalysts (
    campaign VARCHAR NOT NULL,
    import_id BIGINT NOT NULL,
    seq INTEGER NOT NULL,
    catalyst VARCHAR NOT NULL,
    name VARCHAR,
    family VARCHAR,
    molar_mass_g_mol DOUBLE,
    sites_per_unit DOUBLE,
    metal_wt_pct DOUBLE,
    metal_molar_mass_g_mol DOUBLE,
    dispersion DOUBLE
);

CREATE TABLE plates (
    campaign VARCHAR NOT NULL,
    plate VARCHAR NOT NULL,
    import_id BIGINT NOT NULL,
    superseded_by BIGINT,
    seq INTEGER NOT NULL,
    fingerprint VARCHAR NOT NULL,
    format INTEGER,
    n_rows INTEGER,
    n_cols INTEGER,
    temperature_c DOUBLE,
    run_date VARCHAR,
    notes VARCHAR
);

CREATE TABLE wells (
    campaign VARCHAR NOT NULL,
    plate VARCHAR NOT NULL,
    import_id BIGINT NOT NULL,
    seq INTEGER NOT NULL,
    well VARCHAR NOT NULL,
    "row" INTEGER,
    col INTEGER,
    role VARCHAR,
    catalyst VARCHAR,
    loading DOUBLE,
    loading_unit VARCHAR,
    substrate_conc_mM DOUBLE,
    volume_uL DOUBLE,
    temperature_c DOUBLE
);

CREATE TABLE well_factors (
    campaign VARCHAR NOT NULL,
    plate VARCHAR NOT NULL,
    import_id BIGINT NOT NULL,
    seq INTEGER NOT NULL,          -- the wells row this value belongs to
    well VARCHAR NOT NULL,
    factor VARCHAR NOT NULL,
    value VARCHAR
);

CREATE TABLE readings (
    campaign VARCHAR NOT NULL,
    plate VARCHAR NOT NULL,
    import_id BIGINT NOT NULL,
    seq BIGINT NOT NULL,
    well VARCHAR NOT NULL,
    analyte VARCHAR NOT NULL,
    time_h DOUBLE NOT NULL,
    value DOUBLE
);

-- Current rows only: what every query of the analysis sees.
CREATE VIEW current_campaigns AS
    SELECT * FROM campaigns WHERE superseded_by IS NULL;

CREATE VIEW current_catalysts AS
    SELECT c.* FROM catalysts c
    JOIN campaigns h ON h.campaign = c.campaign AND h.import_id = c.import_id
    WHERE h.superseded_by IS NULL;

CREATE VIEW current_plates AS
    SELECT * FROM plates WHERE superseded_by IS NULL;

CREATE VIEW current_wells AS
    SELECT w.* FROM wells w
    JOIN plates p ON p.campaign = w.campaign AND p.plate = w.plate AND p.import_id = w.import_id
    WHERE p.superseded_by IS NULL;

CREATE VIEW current_well_factors AS
    SELECT f.* FROM well_factors f
    JOIN plates p ON p.campaign = f.campaign AND p.plate = f.plate AND p.import_id = f.import_id
    WHERE p.superseded_by IS NULL;

CREATE VIEW current_readings AS
    SELECT r.* FROM readings r
    JOIN plates p ON p.campaign = r.campaign AND p.plate = r.plate AND p.import_id = r.import_id
    WHERE p.superseded_by IS NULL;
