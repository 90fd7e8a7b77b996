-- Loading checked input rows. The staged frame is registered by the store under the
-- name given in each statement (stage_buildings, stage_readings, stage_weather).

-- name: delete_buildings_from_file
DELETE FROM buildings WHERE source_file = $path;

-- name: upsert_buildings
INSERT OR REPLACE INTO buildings BY NAME
SELECT * EXCLUDE (_line), $path AS source_file, _line AS source_line FROM stage_buildings;

-- name: delete_readings_from_file
DELETE FROM readings WHERE source_file = $path;

-- name: delete_readings_of_stage
-- Rows of other files with a key that the staged file now provides (the newer load wins).
DELETE FROM readings USING stage_readings AS s
WHERE readings.building_id = s.building_id AND readings.fuel = s.fuel AND readings.meter_id = s.meter_id
  AND readings.period_start = s.period_start AND readings.period_end = s.period_end;

-- name: upsert_readings
INSERT INTO readings BY NAME
SELECT * EXCLUDE (_line), $path AS source_file, _line AS source_line FROM stage_readings;

-- name: delete_weather_from_file
DELETE FROM weather_daily WHERE source_file = $path;

-- name: delete_weather_of_stage
DELETE FROM weather_daily USING stage_weather AS s
WHERE weather_daily.station_id = s.station_id AND weather_daily.date = s.date;

-- name: upsert_weather
INSERT INTO weather_daily BY NAME
SELECT station_id, date, t_min_f, t_max_f, t_mean_f, $path AS source_file, _line AS source_line
FROM stage_weather;

-- name: delete_load_rejects
DELETE FROM load_rejects WHERE kind = $kind AND path = $path;

-- name: insert_load_rejects
INSERT INTO load_rejects
SELECT $kind AS kind, $path AS path, file, line, "column", value, reason FROM stage_rejects;

-- name: get_input_file
-- The hash recorded for an input file at its last load, if any.
SELECT sha256, options_hash, rows_loaded, rows_rejected FROM input_files WHERE kind = $kind AND path = $path;

-- name: record_input_file
INSERT OR REPLACE INTO input_files
VALUES ($path, $kind, $sha256, $options_hash, $rows_loaded, $rows_rejected, now()::TIMESTAMP);

-- name: select_buildings
SELECT * EXCLUDE (source_file, source_line), source_line AS _line FROM buildings ORDER BY building_id;

-- name: select_readings
SELECT * EXCLUDE (source_file, source_line), source_line AS _line FROM readings
ORDER BY building_id, fuel, meter_id, period_start;

-- name: select_weather
SELECT station_id, date, t_min_f, t_max_f, t_mean_f FROM weather_daily ORDER BY station_id, date;

-- name: select_station_ids
SELECT DISTINCT station_id FROM weather_daily ORDER BY station_id;

-- name: select_load_rejects
SELECT file, line, "column", value, reason FROM load_rejects ORDER BY kind, path, line, "column";
