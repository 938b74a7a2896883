-- about: How far each scenario's ranking of the projects departs from the base scenario's (least alike first).
-- param: run = latest  (run id; "latest" = the newest finished run)
-- param: limit = 20  (how many scenarios to list)
SELECT sc.scenario_id, sc.discount_rate, sc.inflation, r.spearman_rho, r.kendall_tau,
       r.spearman_rho_pi, r.kendall_tau_pi
FROM scenario_ranks r JOIN scenarios sc USING (run_id, scenario_id)
WHERE r.run_id = $run
ORDER BY r.spearman_rho NULLS LAST, sc.scenario_id
LIMIT $limit
