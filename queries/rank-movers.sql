-- about: Projects whose rank by present worth moves most across the scenarios of a run.
-- param: run = latest  (run id; "latest" = the newest finished run)
-- param: limit = 20  (how many projects to list)
SELECT s.project_id, p.name, s.rank_min, s.rank_median, s.rank_max, s.rank_base,
       s.rank_max - s.rank_min AS rank_spread, s.pw_base
FROM project_summary s JOIN run_project_names p ON p.run_id = $run AND p.project_id = s.project_id
WHERE s.run_id = $run
ORDER BY rank_spread DESC, s.rank_base, s.project_id
LIMIT $limit
