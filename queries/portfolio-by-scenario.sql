-- about: What the capital budget buys in each scenario: the optimal portfolio's present worth, the LP bound, the profitability-index greedy answer and what greedy loses.
-- param: run = latest  (run id; "latest" = the newest finished run)
SELECT sc.scenario_id, sc.discount_rate, sc.real_rate, sc.inflation, pf.projects_selected,
       pf.objective, pf.lp_bound, pf.greedy_objective,
       round(1 - pf.greedy_objective / nullif(pf.objective, 0), 4) AS greedy_shortfall,
       pf.budget_used, pf.status, round(pf.solve_seconds, 4) AS solve_seconds
FROM portfolios pf JOIN scenarios sc ON sc.run_id = pf.run_id AND sc.scenario_id = pf.scenario_id
WHERE pf.run_id = $run
ORDER BY sc.scenario_id
