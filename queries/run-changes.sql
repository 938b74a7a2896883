-- about: What changed between an earlier run (before) and a later run (run) of the same database, per project (named as the later run screened it, or the earlier for a removed one): acceptance share, median rank, core-portfolio membership, the preferred alternative of its group, and why where the stored inputs say so (new, removed, changed present worth at an unchanged base scenario).
-- param: run = latest  (run id of the later run; "latest" = the newest finished run)
-- param: before =  (run id of the earlier run)
-- param: min_share_change = 0.05  (least change in acceptance share reported, fraction)
-- param: min_rank_change = 1  (least change in median rank reported)
WITH a AS (SELECT project_id, accept_share, rank_median, pw_base FROM project_summary WHERE run_id = $run),
b AS (SELECT project_id, accept_share, rank_median, pw_base FROM project_summary WHERE run_id = $before),
ca AS (SELECT project_id, in_core FROM portfolio_summary WHERE run_id = $run),
cb AS (SELECT project_id, in_core FROM portfolio_summary WHERE run_id = $before),
base_a AS (SELECT discount_rate, inflation FROM scenarios WHERE run_id = $run AND is_base),
base_b AS (SELECT discount_rate, inflation FROM scenarios WHERE run_id = $before AND is_base),
same_base AS (SELECT count(*) = 1 AS same FROM base_a JOIN base_b USING (discount_rate, inflation)),
pref_a AS (SELECT group_name, mode(preferred) AS preferred FROM group_decisions WHERE run_id = $run GROUP BY group_name),
pref_b AS (SELECT group_name, mode(preferred) AS preferred FROM group_decisions WHERE run_id = $before GROUP BY group_name),
joined AS (
    SELECT coalesce(a.project_id, b.project_id) AS project_id,
           b.accept_share AS accept_share_before, a.accept_share AS accept_share_after,
           b.rank_median AS rank_median_before, a.rank_median AS rank_median_after,
           coalesce(cb.in_core, false) AS core_before, coalesce(ca.in_core, false) AS core_after,
           b.pw_base AS pw_base_before, a.pw_base AS pw_base_after
    FROM a FULL JOIN b USING (project_id)
    LEFT JOIN ca ON ca.project_id = coalesce(a.project_id, b.project_id)
    LEFT JOIN cb ON cb.project_id = coalesce(a.project_id, b.project_id)
)
SELECT j.project_id, CASE WHEN p.project_id IS NOT NULL THEN p.name ELSE q.name END AS name,
       j.accept_share_before, j.accept_share_after, j.rank_median_before, j.rank_median_after,
       j.core_before, j.core_after,
       pb.preferred AS group_preferred_before, pa.preferred AS group_preferred_after,
       CASE WHEN j.accept_share_before IS NULL THEN 'new project'
            WHEN j.accept_share_after IS NULL THEN 'removed project'
            WHEN (SELECT same FROM same_base) AND abs(j.pw_base_after - j.pw_base_before)
                 > 1e-9 * greatest(abs(j.pw_base_before), 1) THEN 'inputs changed (base-scenario worth differs)'
            ELSE NULL END AS why
FROM joined j
LEFT JOIN run_project_names p ON p.run_id = $run AND p.project_id = j.project_id
LEFT JOIN run_project_names q ON q.run_id = $before AND q.project_id = j.project_id
LEFT JOIN pref_a pa ON pa.group_name = coalesce(p.group_name, q.group_name)
LEFT JOIN pref_b pb ON pb.group_name = coalesce(q.group_name, p.group_name)
WHERE j.accept_share_before IS NULL OR j.accept_share_after IS NULL
   OR abs(j.accept_share_after - j.accept_share_before) >= $min_share_change - 1e-12
   OR abs(j.rank_median_after - j.rank_median_before) >= $min_rank_change
   OR j.core_before <> j.core_after
   OR pa.preferred IS DISTINCT FROM pb.preferred
ORDER BY (j.accept_share_before IS NULL OR j.accept_share_after IS NULL) DESC,
         abs(coalesce(j.accept_share_after, 0) - coalesce(j.accept_share_before, 0)) DESC, j.project_id
