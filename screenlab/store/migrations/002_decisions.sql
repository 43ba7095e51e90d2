-- ScreenLab store, schema version 2: recorded decisions, and catalyst aliases.
-- A decision is written once and never updated: a changed mind is a new decision whose
-- `supersedes` names the earlier one (screenlab/store/decisions.py is the only writer).
-- Round links (the next round's parent campaign and the decision it came from) are the
-- [campaign] keys `parent` and `decision` of the stored manifest (campaigns.manifest_json).

CREATE TABLE decisions (
    decision BIGINT NOT NULL,            -- 1, 2, ... over the whole store
    campaign VARCHAR NOT NULL,
    created_at TIMESTAMP NOT NULL,       -- UTC
    author VARCHAR NOT NULL,
    metric VARCHAR NOT NULL,             -- ranking metric (screenlab.stats.ranking.METRICS)
    temperature_c DOUBLE,                -- ranking temperature, degC (NULL: metric without temperature)
    top_k INTEGER,                       -- K of P(top K)
    draws BIGINT,
    seed BIGINT,
    constraints_json VARCHAR NOT NULL,   -- what limited the choice (JSON object)
    settings_json VARCHAR NOT NULL,      -- analysis settings used (JSON object)
    note VARCHAR NOT NULL,
    supersedes BIGINT,                   -- the decision this one replaces (same campaign), or NULL
    campaign_version VARCHAR NOT NULL,   -- sha256 of the campaign's current data when decided
    import_id BIGINT,                    -- the campaign's latest import when decided
    screenlab_version VARCHAR
);

CREATE TABLE decision_catalysts (
    decision BIGINT NOT NULL,
    seq INTEGER NOT NULL,                -- row order
    "position" INTEGER,                  -- 1..k in the order chosen; NULL: the benchmark, for comparison
    catalyst VARCHAR NOT NULL,
    name VARCHAR,
    role VARCHAR,
    estimate DOUBLE,                     -- the metric's estimate at that moment (unit in `unit`)
    ci_low DOUBLE,
    ci_high DOUBLE,
    unit VARCHAR,
    censored VARCHAR,                    -- '' measured, 'lower' / 'upper': estimate is a bound
    "rank" INTEGER,
    rank_low INTEGER,
    rank_high INTEGER,
    p_top DOUBLE,
    p_best DOUBLE,
    p_beats_reference DOUBLE,
    n DOUBLE,
    temperature_c DOUBLE,
    basis VARCHAR,
    flags VARCHAR
);

-- catalysts.csv may name the id a catalyst had in an earlier campaign
ALTER TABLE catalysts ADD COLUMN alias VARCHAR;

CREATE OR REPLACE VIEW current_catalysts AS
    SELECT c.* FROM catalysts c
    JOIN campaigns h ON h.campaign = c.campaign AND h.import_id = c.import_id
    WHERE h.superseded_by IS NULL;
