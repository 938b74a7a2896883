-- about: How far each scenario's ranking of the projects departs from the base scenario's (least alike first). discount_rate is the nominal rate, real_rate the real one; discount_basis is the basis of the run's discount axis.
-- param: run = latest  (run id; "latest" = the newest finished run)
-- param: limit = 20  (how many scenarios to list)
SELECT sc.scenario_id, sc.discount_rate, sc.inflation, r.spearman_rho, r.kendall_tau,
       r.spearman_rho_pi, r.kendall_tau_pi, sc.real_rate, ru.discount_basis
FROM scenario_ranks r JOIN scenarios sc USING (run_id, scenario_id) JOIN runs ru ON ru.run_id = r.run_id
WHERE r.run_id = $run
ORDER BY r.spearman_rho NULLS LAST, sc.scenario_id
LIMIT $limit
