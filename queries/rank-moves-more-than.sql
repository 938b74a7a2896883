-- about: Projects whose rank by present worth moves more than N places between the best and worst scenario.
-- param: run = latest  (run id; "latest" = the newest finished run)
-- param: places = 10  (rank spread, in places)
SELECT s.project_id, p.name, s.rank_base, s.rank_min, s.rank_median, s.rank_max,
       s.rank_max - s.rank_min AS rank_spread, s.pi_rank_min, s.pi_rank_max, round(s.top_k_share, 4) AS top_k_share
FROM project_summary s JOIN run_project_names p ON p.run_id = $run AND p.project_id = s.project_id
WHERE s.run_id = $run AND s.rank_max - s.rank_min > $places
ORDER BY rank_spread DESC, s.project_id
