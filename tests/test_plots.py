"""Figures are written, are PNG files of a readable size, and cover what the run holds."""

from __future__ import annotations

import numpy as np
import pytest
from matplotlib.image import imread

from vfactor import h5io, plots

from results_sample import sample_results


@pytest.mark.parametrize("with_orbit", [True, False])
def test_plot_all(tmp_path, with_orbit):
    r = h5io.read_results(h5io.write_results(tmp_path / "out.h5",
                                             **sample_results(with_orbit=with_orbit)))
    files = plots.plot_all(r, tmp_path / "fig")
    names = sorted(p.name for p in files)
    if with_orbit:
        assert names == ["absorbed_flux.png", "couplings.png", "flux_along_orbit.png",
                         "heat_loads.png", "orbit.png"]
    else:
        assert names == ["couplings.png", "nodes.png"]
    for p in files:
        img = imread(p)
        assert img.shape[0] >= 300 and img.shape[1] >= 500, p.name
        assert np.ptp(img[..., :3]) > 0.5, p.name  # not a blank canvas
