-- about: The assumptions and notes a run states in plain words (comparison basis of alternatives, loans, tax, ...).
-- param: run = latest  (run id; "latest" = the newest finished run)
SELECT n.topic, n.note
FROM run_notes n
WHERE n.run_id = $run
ORDER BY n.topic
