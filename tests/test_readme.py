"""The README's Python example runs, and its two set-up commands are the ones CI runs."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text()


def test_python_example_runs():
    blocks = re.findall(r"```python\n(.*?)```", README, re.S)
    assert blocks
    for code in blocks:
        exec(compile(code, "README.md", "exec"), {})


def test_ci_runs_the_readme_commands():
    sh = re.findall(r"```sh\n(.*?)```", README, re.S)
    ci = (ROOT / ".ci" / "run").read_text()
    assert len(sh) >= 2
    for cmd in sh[:2]:
        assert cmd.strip() in ci
