-- Tables of the screening store. Every statement is idempotent (IF NOT EXISTS).
-- Canonical units are IP (see DEVELOPERS.md, glossary).

-- name: create_buildings
CREATE TABLE IF NOT EXISTS buildings (
    -- one row per building and source file: a building given by two files is resolved
    -- when a run selects its rows (screening/sources.py), never by load order
    building_id VARCHAR,
    name VARCHAR,
    station_id VARCHAR,
    use_type VARCHAR,
    floor_area_ft2 DOUBLE,
    year_built INTEGER,
    stories INTEGER,
    heating_fuel VARCHAR,
    heating_efficiency DOUBLE,
    ua_total_btu_h_f DOUBLE,
    balance_point_f DOUBLE,
    wall_u_btu_h_ft2_f DOUBLE,
    roof_u_btu_h_ft2_f DOUBLE,
    window_u_btu_h_ft2_f DOUBLE,
    window_fraction DOUBLE,
    ach DOUBLE,
    outdoor_air_cfm_ft2 DOUBLE,
    heat_recovery DOUBLE,
    setpoint_f DOUBLE,
    setback_f DOUBLE,
    setback_hours DOUBLE,
    internal_gains_w_ft2 DOUBLE,
    wall_area_ft2 DOUBLE,
    window_area_ft2 DOUBLE,
    roof_area_ft2 DOUBLE,
    address VARCHAR,
    city VARCHAR,
    heat_content DOUBLE,
    price DOUBLE,
    source_file VARCHAR,
    source_line BIGINT
);

-- name: create_readings
CREATE TABLE IF NOT EXISTS readings (
    building_id VARCHAR,
    fuel VARCHAR,
    meter_id VARCHAR,
    period_start DATE,
    period_end DATE,
    quantity DOUBLE,
    unit VARCHAR,
    estimated BOOLEAN,
    cost DOUBLE,
    source_file VARCHAR,
    source_line BIGINT
    -- key (building_id, fuel, meter_id, period_start, period_end): unique within a file (ingest);
    -- across the files a run names, resolved when the run selects its rows (screening/sources.py);
    -- no index, because DuckDB's index makes a reload of a large file several times slower
);

-- name: create_weather_daily
CREATE TABLE IF NOT EXISTS weather_daily (
    station_id VARCHAR,
    date DATE,
    t_min_f DOUBLE,
    t_max_f DOUBLE,
    t_mean_f DOUBLE,
    source_file VARCHAR,
    source_line BIGINT
    -- key (station_id, date): as for readings
);

-- name: create_input_files
CREATE TABLE IF NOT EXISTS input_files (
    path VARCHAR,
    kind VARCHAR,
    sha256 VARCHAR,
    options_hash VARCHAR,
    rows_loaded BIGINT,
    rows_rejected BIGINT,
    loaded_at TIMESTAMP,
    PRIMARY KEY (kind, path)
);

-- name: create_load_rejects
CREATE TABLE IF NOT EXISTS load_rejects (
    kind VARCHAR,
    path VARCHAR,
    file VARCHAR,
    line BIGINT,
    "column" VARCHAR,
    value VARCHAR,
    reason VARCHAR
);

-- name: create_runs
CREATE TABLE IF NOT EXISTS runs (
    run_id VARCHAR PRIMARY KEY,     -- one execution
    run_key VARCHAR,                -- the run's identity in summary.json: label + hash of inputs and settings
    label VARCHAR,
    as_of DATE,
    window_start DATE,
    window_end DATE,
    started_at TIMESTAMP,
    finished_at TIMESTAMP,
    status VARCHAR,
    out_dir VARCHAR,
    config_hash VARCHAR,
    input_hashes VARCHAR,
    versions VARCHAR,
    timings VARCHAR,
    counts VARCHAR,
    message VARCHAR,
    files VARCHAR                   -- what the run published: JSON {relative path: sha256}
);

-- name: create_meta
CREATE TABLE IF NOT EXISTS meta (
    key VARCHAR PRIMARY KEY,
    value VARCHAR
);

-- name: create_results
CREATE TABLE IF NOT EXISTS results (
    run_id VARCHAR,
    building_id VARCHAR,
    rank INTEGER,
    tier VARCHAR,
    needs_review BOOLEAN,
    ratio DOUBLE,
    actual_heating_kbtu DOUBLE,
    expected_heating_kbtu DOUBLE,
    normal_heating_kbtu DOUBLE,
    excess_energy_kbtu DOUBLE,
    excess_cost DOUBLE,
    flags VARCHAR,
    data_issues VARCHAR,
    -- every column of the building as one JSON object, about 4 kB; zstd: DuckDB's own choice for it
    -- took 7 s to write at 10^5 buildings and 2.6 times the space (measured, docs/performance.md)
    record VARCHAR USING COMPRESSION zstd
    -- one row per run and building, kept so by the code that records a run (runs/record.py checks it);
    -- no PRIMARY KEY: its index was rewritten at every commit, 8-15 s of recording 10^5 buildings
);

-- name: create_run_rejects
CREATE TABLE IF NOT EXISTS rejects (
    run_id VARCHAR,
    file VARCHAR,
    line BIGINT,
    "column" VARCHAR,
    value VARCHAR,
    reason VARCHAR
);

-- Schema versions. 1: ddscreen 0.1 (buildings keyed by building_id alone; runs without files).
-- 2: buildings, readings and weather kept per source file; runs record what they published.
-- 3: results without the primary-key index, its JSON records compressed with zstd (the table is
--    copied once, rows and order kept).

-- name: get_schema_version
SELECT value FROM meta WHERE key = 'schema_version';

-- name: set_schema_version
INSERT OR REPLACE INTO meta VALUES ('schema_version', $version);

-- name: has_table
SELECT 1 FROM information_schema.tables WHERE table_name = $table;

-- name: migrate_v2_drop_buildings
-- The version-1 table has building_id as its primary key; it is made again without it.
DROP TABLE IF EXISTS buildings;

-- name: migrate_v2_forget_readings
-- Version-1 rows were kept unique across files by load order; every input is read again.
DELETE FROM readings;

-- name: migrate_v2_forget_weather
DELETE FROM weather_daily;

-- name: migrate_v2_forget_rejects
DELETE FROM load_rejects;

-- name: migrate_v2_forget_inputs
DELETE FROM input_files;

-- name: migrate_v2_runs_files
ALTER TABLE runs ADD COLUMN IF NOT EXISTS files VARCHAR;

-- name: migrate_v3_set_aside_results
-- The results table of version 2 (PRIMARY KEY (run_id, building_id), records compressed as DuckDB
-- chose) is set aside; create_results makes this version's, and the rows are copied into it in order.
ALTER TABLE results RENAME TO results_v2;

-- name: migrate_v3_copy_results
INSERT INTO results BY NAME SELECT * FROM results_v2;

-- name: migrate_v3_drop_results
DROP TABLE results_v2;

-- name: results_primary_keys
-- The primary-key constraints of the results table (none from version 3 on).
SELECT count(*) FROM duckdb_constraints() WHERE table_name = 'results' AND constraint_type = 'PRIMARY KEY';
