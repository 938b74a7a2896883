"""The plain-words assumptions a run states in ``run_notes`` (one row per topic).

Topics written here: "tax" (after-tax conventions), "loans" (the discount rate when projects
carry debt) and "working_capital" (recovery assumed where none is listed).
"""
from __future__ import annotations

from ratescape.run.plan import Plan

TAX_NOTE = (
    "After tax: {losses}. Tax falls at the same point of the period as the flow it arises from ({timing}). Depreciation is "
    "fixed in nominal money from each asset's own service period (each investment line is its own asset, "
    "depreciated from the period it is paid at that period's price), so inflation erodes the tax shield. "
    "The gain on disposal (depreciation recapture, and a land sale's gain over its cost) is taxed at the "
    "ordinary rate and a loss on disposal saves tax at it. Working capital and land are never deducted; "
    "land is not depreciated.{rate}")
OFFSET = "a project's loss in a year offsets the firm's other taxable income that year (a profitable firm)"
CARRIED = ("each project stands alone: a loss is carried forward, without expiry, to the project's own later "
           "profits. Every measure includes the carry-forward: present and annual worth, acceptance, IRR, MIRR, "
           "the alternatives' decisions and frontiers, and the one-at-a-time sensitivity (tornado, spider, "
           "switching values)")
LOANS_NOTE = (
    "{n} project(s) carry a loan: their worth is that of the equity holders' cash flows (loan received, "
    "payments and the interest's tax saving included), so the discount rate should be the cost of equity, not "
    "a weighted average cost of capital; discounting equity flows at a WACC counts the benefit of debt twice "
    "(R. A. Brealey, S. C. Myers, F. Allen, Principles of Corporate Finance, McGraw-Hill, chapter on financing "
    "and valuation; C. S. Park, Contemporary Engineering Economics, Pearson).")
RECOVERY_NOTE = (
    "{n} project(s) pay out working capital or land without listing its recovery: it is assumed to come back at "
    "the project's horizon in the same basis (a real-basis amount grows with inflation to that period).")


def write_run_notes(con, plan: Plan) -> None:
    """Store the run's assumption notes (replacing any of the same run and topic)."""
    notes = {}
    spec = plan.spec
    if spec.after_tax:
        carried = spec.tax.get("losses") == "carry-forward"
        rate = ""
        if "state" in (spec.sources or {}).get("tax_rate", ""):
            rate = (" The income-tax rate is the combined rate t = t_s + t_f (1 - t_s) of the state and federal "
                    "rates given (state tax deductible federally; common practice).")
        timing = {"end": "the end of the year, end-of-period timing", "mid": "mid-year, with the flows under mid-period timing",
                  "beginning": "the start of the period, beginning-of-period timing"}.get(spec.timing, spec.timing)
        notes["tax"] = TAX_NOTE.format(losses=CARRIED if carried else OFFSET, rate=rate, timing=timing)
        loans = con.execute("SELECT count(*) FROM projects WHERE coalesce(loan_amount, 0) > 0").fetchone()[0]
        if loans:
            notes["loans"] = LOANS_NOTE.format(n=loans)
    elif con.execute("SELECT count(*) FROM projects WHERE coalesce(loan_amount, 0) > 0").fetchone()[0]:
        notes["loans"] = ("Projects carry loans, but this run is before tax: loan flows enter only after-tax runs, "
                          "so these worths are of the whole project, to be discounted at the cost of capital.")
    unrecovered = con.execute("""
        SELECT count(DISTINCT project_id) FROM (
            SELECT project_id, kind FROM cash_flows WHERE kind IN ('working_capital', 'land')
            GROUP BY project_id, kind HAVING max(amount) <= 0 AND min(amount) < 0)""").fetchone()[0]
    if unrecovered:
        notes["working_capital"] = RECOVERY_NOTE.format(n=unrecovered)
    for topic, note in notes.items():
        con.execute("INSERT OR REPLACE INTO run_notes VALUES (?, ?, ?)", [plan.run_id, topic, note])


OVERFLOW_NOTE = (
    "{what} too large for double precision (beyond about 1.8e308): stored as NULL, never as infinity, "
    "with the status 'overflow' ({where}). Typical cause: an IRR of hundreds of percent a period stated per "
    "year with many periods a year, or amounts near the load limit at late periods.")


def write_overflow_note(con, run_id: str) -> str | None:
    """Count the run's results stored NULL because they overflowed and say so under the topic
    "overflow" (none: no note); return the note."""
    projects = con.execute("SELECT count(*) FROM project_summary WHERE run_id = ? AND "
                           "contains(measure_status, 'overflow')", [run_id]).fetchone()[0]
    irr_rows = con.execute("SELECT count(*) FROM irr_results WHERE run_id = ? AND status = 'overflow'",
                           [run_id]).fetchone()[0]
    if not projects and not irr_rows:
        return None
    what = " and ".join(part for part in (
        f"{projects:,} project(s) had a measure" if projects else "",
        f"{irr_rows:,} IRR row(s) (project and inflation level) had a rate of return" if irr_rows else "") if part)
    where = "; ".join(part for part in (
        "project_summary.measure_status names the measures" if projects else "",
        "irr_results.status" if irr_rows else "") if part)
    note = OVERFLOW_NOTE.format(what=what, where=where)
    con.execute("INSERT OR REPLACE INTO run_notes VALUES (?, 'overflow', ?)", [run_id, note])
    return note
