"""The layout is the pipeline and the numeric core is pure (STYLE rule 2)."""
import ast
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parents[1] / "src" / "ratescape"
FORBIDDEN = {"duckdb", "polars", "pyarrow", "altair", "vl_convert", "click", "tqdm"}
PURE = sorted((PKG / "evaluate").glob("*.py")) + sorted((PKG / "decide").glob("*.py"))


def _imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names |= {a.name.split(".")[0] for a in node.names}
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            names.add(node.module.split(".")[0])
    return names


@pytest.mark.parametrize("path", PURE, ids=lambda p: f"{p.parent.name}/{p.name}")
def test_numeric_core_imports_no_io_library(path):
    bad = _imports(path) & FORBIDDEN
    assert not bad, f"{path.name} imports {sorted(bad)}; the numeric core must stay pure (numpy/scipy only)"


def test_pipeline_stages_exist():
    for stage in ("load", "grid.py", "evaluate", "decide", "store", "screen.py", "query.py", "cli.py"):
        assert (PKG / stage).exists(), stage
