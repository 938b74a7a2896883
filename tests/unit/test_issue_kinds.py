"""Faults kept per kind (issue 16, part 1): the first of each kind listed, the rest counted."""
from ratescape.errors import MAX_ISSUES_PER_KIND, Issue, Issues, ValidationError, issue_kind


def test_numbers_and_quoted_values_do_not_make_a_new_kind():
    assert issue_kind("c.csv", None, "7 fields where the header has 6") == \
        issue_kind("c.csv", None, "5 fields where the header has 6")
    assert issue_kind("p.csv", "project_id", "the same id already appears on line 4") == \
        issue_kind("p.csv", "project_id", "the same id already appears on line 9")
    assert issue_kind("p.csv", "project_id", "an id that differs only in letter case from 'A'") == \
        issue_kind("p.csv", "project_id", "an id that differs only in letter case from 'B7'")
    assert issue_kind("c.csv", "amount", "not a finite number") != issue_kind("c.csv", "period", "not a finite number")


def test_an_issue_list_keeps_the_first_of_each_kind_and_counts_the_rest():
    issues = Issues()
    for line in range(2, 2 + MAX_ISSUES_PER_KIND + 300):
        issues.append(Issue("c.csv", line, "amount", "x", "not a finite number", "write a number"))
    issues.count_more("c.csv", "amount", "not a finite number", 500)
    issues.append(Issue("c.csv", 9999, "period", "-1", "less than 0", "write 0 or more"))
    assert len(issues) == MAX_ISSUES_PER_KIND + 1 and issues.total == MAX_ISSUES_PER_KIND + 801
    assert [i.line for i in issues[:3]] == [2, 3, 4]            # the first ones, in the order found
    message = ValidationError(issues).message.splitlines()
    assert message[0] == f"{MAX_ISSUES_PER_KIND + 801} problems found in the input; nothing was written."
    assert message[1:7] == [f"  c.csv, line {n}, column 'amount': not a finite number (value 'x'). Fix: write a number"
                            for n in range(2, 7)] + \
        [f"  ... and {MAX_ISSUES_PER_KIND + 800 - 5} more of this kind (c.csv, column 'amount': not a finite number)"]
    assert message[7:] == ["  c.csv, line 9999, column 'period': less than 0 (value '-1'). Fix: write 0 or more"]


def test_merging_the_lists_of_two_files_keeps_and_counts_what_one_list_would():
    """The projects and the cash-flow file are checked on two threads, each into its own list; the
    merged list (projects first) is the list one reading in turn would have built."""
    def found(file, n, column="amount"):
        return [Issue(file, line, column, "x", "not a finite number", "write a number") for line in range(2, 2 + n)]
    one = Issues()
    for issue in found("p.csv", 30, "first_cost") + found("c.csv", MAX_ISSUES_PER_KIND + 40):
        one.append(issue)
    one.count_more("c.csv", "amount", "not a finite number", 7)
    projects, flows = Issues(), Issues()
    for issue in found("p.csv", 30, "first_cost"):
        projects.append(issue)
    for issue in found("c.csv", MAX_ISSUES_PER_KIND + 40):
        flows.append(issue)
    flows.count_more("c.csv", "amount", "not a finite number", 7)
    merged = Issues()
    merged.merge(projects)
    merged.merge(flows)
    assert list(merged) == list(one) and merged.omitted == one.omitted and merged.seen == one.seen
    assert merged.total == 30 + MAX_ISSUES_PER_KIND + 47
    assert ValidationError(merged).message == ValidationError(one).message
