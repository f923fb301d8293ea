"""The README's engine example runs as written (the documented API is the real one)."""

import os
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_readme_engine_example_runs(monkeypatch):
    text = (ROOT / "README.md").read_text()
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    assert blocks, "README has no python example"
    monkeypatch.chdir(ROOT)
    namespace: dict = {}
    exec(compile(blocks[0], "README.md", "exec"), namespace)   # noqa: S102 - our own docs
    res, sw, report = namespace["res"], namespace["sw"], namespace["report"]
    assert list(res.table.columns) == ["estimate", "std_error", "t_stat", "p_value", "ci_low",
                                       "ci_high"]
    assert sw.t_stat.shape == (3, 60, 3)
    assert len(report.tests) > 10


def test_readme_quick_start_commands_are_the_ci_commands():
    readme = (ROOT / "README.md").read_text()
    ci = (ROOT / ".ci" / "run").read_text()
    test_cmd = 'pip install -c constraints.txt ".[test]" && python -m pytest'
    assert test_cmd in readme and test_cmd in ci
    assert "pip install -c constraints.txt . && lagwise serve" in readme
    assert os.access(ROOT / ".ci" / "run", os.X_OK)
