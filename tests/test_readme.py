"""The README's first example runs as written and gives the textbook rocksalt structure factor.

Reference: F(200) = 4(f_Na T_Na + f_Cl T_Cl) for rocksalt (h, k, l all even; Warren,
"X-ray Diffraction", ch. 4 — from memory), with Waasmaier–Kirfel f0 from periodictable and
T = exp(−B s²); a 6³ supercell multiplies the amplitude by 216 (Laue function); between the
parent cell's reciprocal points the box's lattice points scatter nothing.
"""

import os
import re
from pathlib import Path

import numpy as np
import periodictable.cromermann as wk

README = Path(__file__).parent.parent / "README.md"


def test_first_example_runs_and_is_right(tmp_path, monkeypatch):
    text = README.read_text()
    code = re.search(r"```python\n(.*?)```", text, re.S).group(1)
    monkeypatch.chdir(tmp_path)
    env: dict = {}
    exec(compile(code, "README.md", "exec"), env)  # the README's own example, as written
    pattern = env["pattern"]
    assert os.path.exists("nacl_hk0.h5") and os.path.getsize("nacl_hk0.png") > 1000
    a = 5.6402
    s = 2.0 / a / 2.0  # (200): s = sinθ/λ = 1/(2d), d = a/2
    f_na, f_cl = wk.fxrayatstol("Na", s), wk.fxrayatstol("Cl", s)
    t_na, t_cl = np.exp(-1.2 * s * s), np.exp(-0.9 * s * s)
    f200 = 4 * (f_na * t_na + f_cl * t_cl)
    assert np.isclose(pattern.intensity[36, 24], (216 * f200) ** 2, rtol=1e-10)
    h = pattern.grid.hkl_values().reshape(49, 49, 3)
    between = ~np.all(np.abs(h - np.round(h)) < 1e-9, axis=-1)
    assert pattern.intensity[between].max() < 1e-20 * pattern.intensity.max()
