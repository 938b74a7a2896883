-- about: Switching values (the input value at which a project's accept/reject decision flips) closest to the base case, as a change from base. The discount rate is on the run's basis (discount_basis: nominal or real; input_label names it).
-- param: run = latest  (run id; "latest" = the newest finished run)
-- param: input = any  (discount_rate, inflation, first_cost, benefits, escalation, or any)
-- param: limit = 25  (how many rows)
SELECT v.project_id, p.name, v.input, v.base_value, v.switching_value,
       round(v.switching_change, 4) AS change_from_base, v.switching_status, v.worth_base,
       r.discount_basis,
       CASE v.input WHEN 'discount_rate' THEN coalesce(r.discount_basis, 'nominal') || ' discount rate'
                    WHEN 'inflation' THEN 'inflation (' || coalesce(r.discount_basis, 'nominal') || ' discount rate held fixed)'
                    ELSE replace(v.input, '_', ' ') END AS input_label
FROM sensitivity v JOIN run_project_names p ON p.run_id = $run AND p.project_id = v.project_id JOIN runs r ON r.run_id = v.run_id
WHERE v.run_id = $run AND v.switching_value IS NOT NULL AND ($input = 'any' OR v.input = $input)
ORDER BY abs(v.switching_change), v.project_id, v.input
LIMIT $limit
