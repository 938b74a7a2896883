-- about: Projects accepted (present worth >= 0) in every scenario of a run, best base-case worth first.
-- param: run = latest  (run id; "latest" = the newest finished run)
SELECT s.project_id, p.name, p.group_name, s.pw_min, s.pw_base, s.pw_max, s.rank_base
FROM project_summary s JOIN run_project_names p ON p.run_id = $run AND p.project_id = s.project_id
WHERE s.run_id = $run AND s.accept_share = 1.0
ORDER BY s.pw_base DESC, s.project_id
