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

-- name: record_publishing
-- Everything of a finished run, recorded just before its folder is renamed into place;
-- 'publishing' becomes 'ok' right after the rename. A run that died in between is settled
-- by the next one from what the folder holds (its files' hashes against `files`).
UPDATE runs SET finished_at = now()::TIMESTAMP, status = 'publishing', input_hashes = $input_hashes,
    versions = $versions, timings = $timings, counts = $counts, message = '', out_dir = $out_dir,
    files = $files
WHERE run_id = $run_id;

-- name: set_run_status
UPDATE runs SET status = $status, message = $message WHERE run_id = $run_id;

-- name: runs_publishing
SELECT run_id, out_dir, files, COALESCE(run_key, run_id) AS run_key FROM runs WHERE status = 'publishing'
ORDER BY started_at, run_id;

-- name: forget_results_of_stale_runs
-- The results and rejects a run stored before it died, still 'running' (it never recorded its files):
-- a run that did not reach publishing keeps none of them.
DELETE FROM results WHERE run_id IN (SELECT run_id FROM runs WHERE status = 'running');

-- name: forget_rejects_of_stale_runs
DELETE FROM rejects WHERE run_id IN (SELECT run_id FROM runs WHERE status = 'running');

-- name: mark_stale_runs
-- Runs left 'running' by a process that died are marked as interrupted.
UPDATE runs SET status = 'interrupted', message = 'the process ended before the run finished'
WHERE status = 'running';

-- name: published_files_of_folder
-- What the runs that published into a folder recorded, newest first: the folder is the
-- tool's own when its files match one of these.
SELECT run_id, files FROM runs
WHERE out_dir = $out_dir AND files IS NOT NULL AND status IN ('ok', 'publishing')
ORDER BY started_at DESC, run_id DESC;

-- name: published_folders
-- Every folder a successful run published, with the newest window it holds.
SELECT out_dir, max(window_end) AS window_end, max(started_at) AS started_at FROM runs
WHERE status = 'ok' AND files IS NOT NULL AND out_dir <> ''
GROUP BY out_dir ORDER BY window_end DESC, started_at DESC, out_dir;

-- name: delete_results_of_run
DELETE FROM results WHERE run_id = $run_id;

-- name: insert_results
INSERT INTO results BY NAME SELECT * FROM stage_results;

-- name: delete_rejects_of_run
DELETE FROM rejects WHERE run_id = $run_id;

-- name: insert_rejects
INSERT INTO rejects SELECT $run_id AS run_id, file, line, "column", value, reason FROM stage_rejects;

-- name: list_runs
-- run_key is the id the outputs show (the same for a rerun of the same inputs); run_id names one execution
SELECT run_id, label, as_of, window_start, window_end, started_at, finished_at, status, out_dir, counts,
       COALESCE(run_key, run_id) AS run_key
FROM runs ORDER BY started_at DESC, run_id DESC LIMIT $limit;

-- name: resolve_run
-- The execution a user's id names: an execution id, or a run key (the id on the outputs) whose newest
-- successful execution is taken (else its newest).
SELECT run_id FROM runs WHERE run_id = $run OR run_key = $run
ORDER BY (run_id = $run) DESC, (status = 'ok') DESC, started_at DESC, run_id DESC LIMIT 1;

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
SELECT run_id, run_key FROM runs
WHERE status = 'ok' AND run_id <> $run_id
  AND window_end < (SELECT window_end FROM runs WHERE run_id = $run_id)
ORDER BY window_end DESC, started_at DESC, run_id DESC LIMIT 1;

-- name: plan_before_events
-- For each (building_id, audit_date) of stage_audits: what the latest successful run whose window
-- ended before that day said of the building (the list an audit acted on; issue 17).
SELECT building_id, audit_date, in_plan, cost_then, mechanism_then FROM (
  SELECT a.building_id, a.audit_date,
         CAST(json_extract(r.record, '$.in_plan') AS BOOLEAN) AS in_plan,
         CAST(json_extract(r.record, '$.expected_recoverable_cost') AS DOUBLE) AS cost_then,
         json_extract_string(r.record, '$.mechanisms[0]') AS mechanism_then,
         row_number() OVER (PARTITION BY a.building_id, a.audit_date
                            ORDER BY u.window_end DESC, u.started_at DESC, u.run_id DESC) AS k
  FROM stage_audits a
  JOIN results r ON r.building_id = a.building_id
  JOIN runs u ON u.run_id = r.run_id
  WHERE u.status = 'ok' AND u.window_end < a.audit_date
) WHERE k = 1
ORDER BY building_id, audit_date;

-- name: run_inputs
-- The input files a run recorded (JSON {"kind:path": sha256}), with its window's end (ddscreen history, issue 17).
SELECT input_hashes, window_end FROM runs WHERE run_id = $run_id;
