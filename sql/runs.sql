-- Runs and their results, kept for comparison between quarters.

-- name: insert_run
INSERT INTO runs (run_id, run_key, label, as_of, window_start, window_end, started_at, status, out_dir, config_hash)
VALUES ($run_id, $run_key, $label, $as_of, $window_start, $window_end, now()::TIMESTAMP, 'running', $out_dir,
        $config_hash);

-- name: delete_run
-- A run stopped by bad input before anything was loaded leaves no row.
DELETE FROM runs WHERE run_id = $run_id;

-- name: finish_run
UPDATE runs SET finished_at = now()::TIMESTAMP, status = $status, input_hashes = $input_hashes,
    versions = $versions, timings = $timings, counts = $counts, message = $message, out_dir = $out_dir
WHERE run_id = $run_id;

-- name: mark_stale_runs
-- Runs left 'running' by a process that died are marked as interrupted.
UPDATE runs SET status = 'interrupted' WHERE status = 'running';

-- name: delete_results_of_run
DELETE FROM results WHERE run_id = $run_id;

-- name: insert_results
INSERT INTO results BY NAME SELECT * FROM stage_results;

-- name: delete_rejects_of_run
DELETE FROM rejects WHERE run_id = $run_id;

-- name: insert_rejects
INSERT INTO rejects SELECT $run_id AS run_id, file, line, "column", value, reason FROM stage_rejects;

-- name: list_runs
SELECT run_id, label, as_of, window_start, window_end, started_at, finished_at, status, out_dir, counts
FROM runs ORDER BY started_at DESC, run_id DESC LIMIT $limit;

-- name: get_run
SELECT run_id, label, as_of, window_start, window_end, started_at, finished_at, status, out_dir, counts
FROM runs WHERE run_id = $run_id;

-- name: results_of_run
SELECT building_id, rank, tier, needs_review, ratio, actual_heating_kbtu, expected_heating_kbtu,
       normal_heating_kbtu, excess_energy_kbtu, excess_cost, flags, data_issues
FROM results WHERE run_id = $run_id ORDER BY building_id;

-- name: previous_quarter_ok_run
-- The latest successful run of an earlier window than the given run's: what a quarter is
-- compared with. A rerun of the same quarter is compared with the same earlier quarter,
-- so its outputs are identical.
SELECT run_id FROM runs
WHERE status = 'ok' AND run_id <> $run_id
  AND window_end < (SELECT window_end FROM runs WHERE run_id = $run_id)
ORDER BY window_end DESC, started_at DESC, run_id DESC LIMIT 1;
