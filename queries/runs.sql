-- about: Every run in the database with its status, size and timing.
SELECT run_id, status, started_at, finished_at, project_count, scenario_count, discount_basis, timing,
       after_tax, chunks_done, chunk_count, message
FROM runs ORDER BY started_at DESC
