-- Explicit transactions (DuckDB's context manager only closes; it never commits), and the session's settings.

-- name: tx_begin
BEGIN TRANSACTION;

-- name: tx_commit
COMMIT;

-- name: tx_rollback
ROLLBACK;

-- name: session_quiet
-- No progress bar: DuckDB draws one on stderr for a long statement (a cron mail, a log file).
SET enable_progress_bar = false;

-- name: session_checkpoint_direct
-- A commit DuckDB estimates above this size is written straight into the database file (a checkpoint)
-- instead of first into the write-ahead log and again at the next checkpoint: a run's results (about
-- 60 bytes a building in DuckDB's estimate, 3-4 kB a building in fact) were written twice (10^5
-- buildings: 1.7 s into the log, 2.3 s checkpointed at the next status update; directly: about 2 s).
-- Small commits (a run's status) stay in the log.
SET checkpoint_threshold = '256KB';
