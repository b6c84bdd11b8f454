"""`peerfix run --plots`: tracks and error over time for one run of a moving scenario."""

from __future__ import annotations

import matplotlib.image as mpimg
import numpy as np

from peerfix.cli import main
from peerfix.scenario import write_scenario
from peerfix.simulate import simulate


def test_plots_of_a_moving_run(tmp_path, capsys):
    write_scenario(simulate("cold-store-shift", 4, duration_s=4.0), tmp_path / "shift")
    out = tmp_path / "run"
    assert main(["run", str(tmp_path / "shift"), "--engine", "fixed", "--iterations", "1", "--plots", "--out", str(out)]) == 0
    for name in ("tracks.png", "error_over_time.png"):
        image = mpimg.imread(out / name)
        # A drawn figure, not a blank canvas: many distinct colours.
        assert image.shape[0] > 300 and len(np.unique(image.reshape(-1, image.shape[-1]), axis=0)) > 50
    assert "picture:" in capsys.readouterr().err


def test_plots_need_several_epochs(tmp_path, capsys):
    write_scenario(simulate("open-field", 1, agents=12), tmp_path / "still")
    out = tmp_path / "run"
    assert main(["run", str(tmp_path / "still"), "--iterations", "2", "--plots", "--out", str(out)]) == 0
    assert "no pictures: tracks need at least two epochs" in capsys.readouterr().err
    assert not (out / "tracks.png").exists() and (out / "estimates.csv").exists()
