-- about: Projects selected by capital rationing in at least a share of the scenarios (the core portfolio), with their selection share and min-max-regret membership.
-- param: run = latest  (run id; "latest" = the newest finished run)
-- param: min_share = 0.8  (least share of scenarios in which a project is selected)
SELECT ps.project_id, p.name, p.group_name, round(ps.selected_share, 4) AS selected_share,
       round(ps.selected_probability, 4) AS selected_probability, ps.in_min_max_regret,
       s.pw_base, s.accept_share
FROM portfolio_summary ps
JOIN run_project_names p ON p.run_id = $run AND p.project_id = ps.project_id
JOIN project_summary s ON s.run_id = ps.run_id AND s.project_id = ps.project_id
WHERE ps.run_id = $run AND ps.selected_share >= $min_share
ORDER BY ps.selected_share DESC, s.pw_base DESC, ps.project_id
