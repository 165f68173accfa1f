"""The README's design-flow API block runs as written after the main API block (our own
documentation; common practice, no source), and its mass balance holds (closed form)."""

import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def test_readme_design_flow_block_runs(monkeypatch):
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    design = [b for b in blocks if "design_flows" in b]
    assert design, "the README has a design-flow API block"
    monkeypatch.chdir(ROOT)
    env = {}
    exec(compile(blocks[0], "README.md", "exec"), env)
    exec(compile(design[0], "README.md", "exec"), env)
    rows, hyd = env["rows"], env["hydrograph"]
    assert set(rows["method"]) == {"kirpich", "nrcs_lag", "tr55_velocity", "rational",
                                   "nrcs_unit_hydrograph"}
    uh = rows.set_index("method").loc["nrcs_unit_hydrograph"]
    step_s = float(hyd["time_h"].iloc[1] - hyd["time_h"].iloc[0]) * 3600
    vol = float(hyd["direct_runoff_m3_per_s"].sum()) * step_s
    assert vol == pytest.approx(uh["runoff_depth_mm"] * 1e-3 * uh["area_m2"], rel=1e-3)
    assert env["fig"].axes
