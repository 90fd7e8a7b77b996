-- Tables of the screening store. Every statement is idempotent (IF NOT EXISTS).
-- Canonical units are IP (see DEVELOPERS.md, glossary).

-- name: create_buildings
CREATE TABLE IF NOT EXISTS buildings (
    building_id VARCHAR PRIMARY KEY,
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
    -- key (building_id, fuel, meter_id, period_start, period_end): kept unique by load.sql
    -- (delete the file's old rows and any row with a staged key, then insert); no index, because
    -- DuckDB's index makes a reload of a large file several times slower
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
    -- key (station_id, date): kept unique by load.sql, as for readings
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
    message VARCHAR
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
    record VARCHAR,
    PRIMARY KEY (run_id, building_id)
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
