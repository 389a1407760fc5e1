"""The ``kinemap powder`` and ``kinemap pdf`` commands (kinemap.powder_cli), driven through a
parser built the way kinemap.cli builds its own. Checks compare the files with the library's
documented results and with analytic values (fcc coordination, G = −4πρ₀r below the first
neighbour)."""

import h5py
import numpy as np
import pytest

import kinemap as km
from kinemap.cli import build_parser
from kinemap.cli._args import UsageError, fix_negative_numbers
from kinemap.errors import InvalidInputError


def run(argv):
    """The command's handler called directly (errors raise instead of becoming exit codes)."""
    args = build_parser().parse_args(fix_negative_numbers(argv))
    args.argv_used = argv
    return args.func(args)


@pytest.fixture
def fcc_file(tmp_path):
    a, n = 4.05, 3
    fcc = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])
    cells = np.array([[i, j, k] for i in range(n) for j in range(n) for k in range(n)])
    model = km.Model((cells[:, None] + fcc[None]).reshape(-1, 3) / n, "Al", box=np.eye(3) * n * a,
                     cell=np.eye(3) * n * a, fractional=True)
    return km.write_h5md(tmp_path / "al.h5md", [model, model.translated([0.1, 0.2, 0.3])]), model


def test_powder_writes_nexus_and_png(fcc_file, tmp_path, capsys):
    path, model = fcc_file
    out = tmp_path / "p.h5"
    assert run(["powder", str(path), "--q", "1:8:71", "-o", str(out), "--png", "--no-progress"]) == 0
    assert out.exists() and out.with_suffix(".png").stat().st_size > 1000
    with pytest.warns(km.PowderCautionWarning):  # Q = 1 lies below 2π/r_max = 1.03
        want = km.powder(model, np.linspace(1, 8, 71))  # same model, same defaults
    back = km.load_pattern(out)
    np.testing.assert_allclose(back.intensity, want.intensity, rtol=1e-12)
    assert back.metadata["provenance"]["frames"] == [0]
    assert "powder pattern written" in capsys.readouterr().out


def test_powder_frames_and_particle(fcc_file, tmp_path):
    path, _ = fcc_file
    out = tmp_path / "p.h5"
    assert run(["powder", str(path), "--q", "1:8:15", "--frames", "all", "--particle", "-o", str(out),
                "--probe", "neutron", "-q", "--no-progress"]) == 0
    with h5py.File(out) as f:
        assert f["entry/parameters/n_frames"][()] == 2
        assert f["entry/parameters/periodic"][()] in (b"false", "false", False, 0)


def test_pdf_command(fcc_file, tmp_path):
    path, _ = fcc_file
    out = tmp_path / "g.h5"
    assert run(["pdf", str(path), "--r", "0:6:601", "-o", str(out), "--png", "-q", "--no-progress"]) == 0
    with h5py.File(out) as f:
        r, g = f["entry/data/r"][()], f["entry/data/G"][()]
    rho0 = 4 / 4.05**3
    below = r < 2.7
    np.testing.assert_allclose(g[below], -4 * np.pi * rho0 * r[below], atol=1e-12)  # g = 0 there
    assert out.with_suffix(".png").exists()


def test_bad_command_lines(fcc_file, tmp_path):
    path, _ = fcc_file
    with pytest.raises(UsageError, match="--q"):
        run(["powder", str(path), "--q", "1:8", "-o", str(tmp_path / "x.h5")])
    with pytest.raises(UsageError, match="needs --probe"):
        run(["pdf", str(path), "--energy", "8", "-o", str(tmp_path / "x.h5")])
    with pytest.raises(InvalidInputError, match="half the smallest"):
        run(["pdf", str(path), "--r", "0:9:91", "-o", str(tmp_path / "x.h5"), "-q", "--no-progress"])
    with pytest.raises(FileNotFoundError):
        run(["powder", str(path), "-o", str(tmp_path / "missing" / "x.h5")])
    assert not list(tmp_path.glob("*.h5"))
