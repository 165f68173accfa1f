"""The README's Python API block runs as written (our own documentation; common practice, no
source), and its results agree with the closed form where one exists."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_readme_python_api_block_runs(monkeypatch):
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    assert blocks, "the README has a Python API block"
    monkeypatch.chdir(ROOT)  # the block uses paths relative to the checkout
    env = {}
    exec(compile(blocks[0], "README.md", "exec"), env)
    # the crossing's catchment is one connected area upstream of its outlet: its area is
    # the count of its cells times the projected cell area (closed form on a projected grid)
    basins, fm = env["basins"], env["fm"]
    mask = basins.catchment_mask("crossing")
    cell_area = abs(fm.terrain.transform.a * fm.terrain.transform.e)
    area = float(basins.table.set_index("outlet_id").loc["crossing", "area_m2"])
    assert abs(area - mask.sum() * cell_area) <= 1e-6 * area
