-- Loading checked input rows. The staged frame is registered by the store under the
-- name given in each statement (stage_buildings, stage_readings, stage_weather).

-- name: delete_buildings_from_file
DELETE FROM buildings WHERE source_file = $path;

-- name: insert_buildings
INSERT INTO buildings BY NAME
SELECT * EXCLUDE (_line), $path AS source_file, _line AS source_line FROM stage_buildings;

-- name: delete_readings_from_file
DELETE FROM readings WHERE source_file = $path;

-- name: insert_readings
INSERT INTO readings BY NAME
SELECT * EXCLUDE (_line), $path AS source_file, _line AS source_line FROM stage_readings;

-- name: delete_weather_from_file
DELETE FROM weather_daily WHERE source_file = $path;

-- name: insert_weather
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

-- name: forget_input_file
-- A file read in chunks is recorded once its repeated keys are settled (screening/pipeline.py load_inputs).
DELETE FROM input_files WHERE kind = $kind AND path = $path;

-- name: record_input_file
INSERT OR REPLACE INTO input_files
VALUES ($path, $kind, $sha256, $options_hash, $rows_loaded, $rows_rejected, now()::TIMESTAMP);

-- name: forget_buildings_of_other_files
-- Rows of files the run no longer names (moved away, renamed, a glob that matches less):
-- a run screens exactly the files it names now.
DELETE FROM buildings WHERE NOT list_contains($paths, source_file);

-- name: forget_readings_of_other_files
DELETE FROM readings WHERE NOT list_contains($paths, source_file);

-- name: forget_weather_of_other_files
DELETE FROM weather_daily WHERE NOT list_contains($paths, source_file);

-- name: forget_load_rejects_of_other_files
DELETE FROM load_rejects WHERE kind = $kind AND NOT list_contains($paths, path);

-- name: forget_other_input_files
DELETE FROM input_files WHERE kind = $kind AND NOT list_contains($paths, path);

-- name: select_buildings
SELECT * EXCLUDE (source_file, source_line), source_line AS _line, source_file AS _file FROM buildings
ORDER BY building_id, source_file, source_line;

-- name: select_readings
SELECT * EXCLUDE (source_file, source_line), source_line AS _line, source_file AS _file FROM readings
ORDER BY building_id, fuel, meter_id, period_start, source_file, source_line;

-- name: select_readings_of_buildings
-- The readings of the building ids from $lo to $hi (a chunk's first and last; the caller keeps its own
-- ids of them), in the table's order: DuckDB keeps the insertion order, a file's order, so a file
-- sorted by building reads only the blocks of the chunk, and no sort (units.convert_to_kbtu sorts,
-- unless the rows come in its order already).
SELECT * EXCLUDE (source_file, source_line), source_line AS _line FROM readings
WHERE building_id BETWEEN $lo AND $hi;

-- name: select_readings_of_other_buildings
SELECT * EXCLUDE (source_file, source_line), source_line AS _line, source_file AS _file FROM readings
WHERE building_id NOT IN (SELECT unnest($ids::VARCHAR[]))
ORDER BY building_id, fuel, meter_id, period_start, source_file, source_line;

-- name: count_reading_files
SELECT count(DISTINCT source_file) FROM readings;

-- name: count_buildings
SELECT count(*) FROM buildings;

-- name: select_weather
SELECT station_id, date, t_min_f, t_max_f, t_mean_f, source_line AS _line, source_file AS _file
FROM weather_daily ORDER BY station_id, date, source_file, source_line;

-- name: select_station_ids
SELECT DISTINCT station_id FROM weather_daily ORDER BY station_id;

-- name: select_load_rejects
SELECT file, line, "column", value, reason FROM load_rejects ORDER BY kind, path, line, "column";

-- name: select_repeated_reading_keys_of_file
-- Streaming ingest (screening/streaming.py): the rows of one file whose meter and period occur more
-- than once in it, in line order, for the duplicate and conflict checks across chunks. The rows of a
-- repeated key share its hash: the exact grouping runs on the rows of repeated hashes only (10^5
-- buildings, 4.25 M readings: 1.0 s of CPU instead of 1.3-1.9 s).
WITH repeated AS (
    SELECT hash(building_id, fuel, meter_id, period_start, period_end) AS h FROM readings WHERE source_file = $path
    GROUP BY h HAVING count(*) > 1
), candidates AS (
    SELECT building_id, fuel, meter_id, period_start, period_end, quantity, unit, estimated, cost, source_line
    FROM readings
    WHERE source_file = $path
      AND hash(building_id, fuel, meter_id, period_start, period_end) IN (SELECT h FROM repeated)
), keys AS (
    SELECT building_id, fuel, meter_id, period_start, period_end FROM candidates GROUP BY ALL HAVING count(*) > 1
)
SELECT c.building_id, c.fuel, c.meter_id, c.period_start, c.period_end, c.quantity, c.unit, c.estimated, c.cost,
       c.source_line AS _line
FROM candidates c JOIN keys k
  ON c.building_id = k.building_id AND c.fuel = k.fuel AND c.meter_id = k.meter_id
 AND c.period_start = k.period_start AND c.period_end = k.period_end
ORDER BY c.source_line;

-- name: delete_readings_of_file_lines
-- stage_lines: the lines (column line) to delete, as a registered frame (a hash join, not a list scan)
DELETE FROM readings WHERE source_file = $path AND source_line IN (SELECT line FROM stage_lines);

-- name: select_repeated_buildings_of_file
-- Streaming ingest: the rows of one buildings file whose building_id occurs more than once in it.
SELECT * EXCLUDE (source_file, source_line), source_line AS _line
FROM buildings
WHERE source_file = $path
  AND building_id IN (SELECT building_id FROM buildings WHERE source_file = $path GROUP BY building_id
                      HAVING count(*) > 1)
ORDER BY source_line;

-- name: delete_buildings_of_file_lines
DELETE FROM buildings WHERE source_file = $path AND source_line IN (SELECT line FROM stage_lines);
