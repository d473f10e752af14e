"""The README's quick start and .ci/run must not drift apart; the job paragraph and the caution stay."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _quick_start_commands() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"```bash\n(.+?)\n```", section, flags=re.S)


def test_quick_start_has_exactly_two_commands():
    cmds = _quick_start_commands()
    assert len(cmds) == 2
    assert all("\n" not in c for c in cmds)


def test_ci_runs_the_readme_test_command_verbatim():
    test_cmd = _quick_start_commands()[1]
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()
    assert test_cmd in ci
    assert "pytest" in test_cmd


def test_readme_opens_with_the_job_and_keeps_the_caution():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    first_para = text.split("\n\n")[1]
    assert "impulse" in first_para and "transformer" in first_para
    assert "## Safety" in text and "responsible" in text


def test_training_example_toml_is_a_valid_winding_family(tmp_path):
    from synthetic.scenario import load_family, sample_scenario

    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("## Training on your own winding designs", 1)[1]
    toml = re.findall(r"```toml\n(.+?)\n```", section, flags=re.S)[0]
    path = tmp_path / "nv25_hv.toml"
    path.write_text(toml, encoding="utf-8")
    family = load_family(path)
    assert family.name == "nv25_hv"
    import numpy as np

    sc = sample_scenario(np.random.default_rng(0), family, event="turn_to_turn")
    assert sc.bil_V == 325e3
