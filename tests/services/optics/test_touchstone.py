"""The Touchstone file keeps every S-parameter's amplitude and phase (read back with scikit-rf, PyPI)."""

import numpy as np
import pytest

from services.optics.touchstone import ETA0_OHM, touchstone_s2p
from services.optics.transfer import slab_airy


def test_the_s2p_file_reads_back_with_its_reflection_phase(tmp_path):
    """A 2 mm slab's r and t (Born & Wolf 7.6) come back from the .s2p as written, S12 = S21."""
    skrf = pytest.importorskip("skrf")
    freqs = np.array([75.0, 90.0, 110.0])
    t, r = slab_airy(2.8, 0.02, 2.0, freqs)
    s11, s22 = r, -0.5 * r  # distinct on purpose, so a swap or a sign shows
    path = tmp_path / "slab.s2p"
    path.write_text(touchstone_s2p(freqs, s11, t, s22, name="slab"))
    net = skrf.Network(str(path))
    assert net.s[:, 0, 0] == pytest.approx(s11, abs=1e-9)
    assert net.s[:, 1, 0] == pytest.approx(t, abs=1e-9) and net.s[:, 0, 1] == pytest.approx(t, abs=1e-9)
    assert net.s[:, 1, 1] == pytest.approx(s22, abs=1e-9)
    assert net.z0[0, 0].real == pytest.approx(ETA0_OHM, abs=1e-3)
