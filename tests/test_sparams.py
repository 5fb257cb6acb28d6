"""Mixed-mode conversion and Touchstone writing (ebglayout/sparams.py), checked against scikit-rf's own media and
reader and against the mixed-mode definitions worked out by hand.

Outside references: D. E. Bockelman and W. R. Eisenstadt, "Combined differential and common-mode scattering
parameters: theory and simulation", IEEE T-MTT 43(7), 1995, section II (from memory): with Vd = V1 - V2,
Id = (I1 - I2) / 2, Vc = (V1 + V2) / 2, Ic = I1 + I2 and modal reference impedances Zdiff = 2 Z0, Zcomm = Z0 / 2
(uncoupled single-ended ports of Z0), logical port 1 = single-ended ports 1, 2 and logical port 2 = ports 3, 4,

    Sdd11 = (S11 - S12 - S21 + S22) / 2    Sdd21 = (S31 - S32 - S41 + S42) / 2
    Scc11 = (S11 + S12 + S21 + S22) / 2    Scc21 = (S31 + S32 + S41 + S42) / 2
    Sdc21 = (S31 + S32 - S41 - S42) / 2

and scikit-rf's transmission-line media (``DefinedGammaZ0``) and Touchstone reader.
"""
from __future__ import annotations

import numpy as np
import pytest
import skrf

from ebglayout.errors import EbgError
from ebglayout.sparams import common_through, mixed_mode, touchstone_text, write_touchstone

FREQ = skrf.Frequency(1, 20, 39, "GHz")
C0 = 299_792_458.0


def lossless_media(z0: float = 50.0, er: float = 3.5):
    """scikit-rf TEM media of a lossless line in a dielectric er: gamma = j omega sqrt(er) / c."""
    return skrf.media.DefinedGammaZ0(FREQ, z0=z0, gamma=1j * 2 * np.pi * FREQ.f * np.sqrt(er) / C0)


def pair_of_lines(length_p_mm: float, length_n_mm: float, z0: float = 50.0):
    """Two uncoupled matched lines (P and N) as a 4-port in the project's port order: 1 P near, 2 N near,
    3 P far, 4 N far.  scikit-rf's concat_ports(port_order="first") gives P near, P far, N near, N far."""
    media = lossless_media(z0)
    both = skrf.network.concat_ports([media.line(length_p_mm, "mm"), media.line(length_n_mm, "mm")],
                                     port_order="first")
    both.renumber([0, 1, 2, 3], [0, 2, 1, 3])
    return both


def test_uncoupled_matched_lines_pass_both_modes_and_convert_nothing():
    network = pair_of_lines(12.0, 12.0)
    assert abs(network.s[:, 2, 0]).min() == pytest.approx(1.0, abs=1e-12)  # P near -> P far: a through
    mm = mixed_mode(network)
    np.testing.assert_allclose(abs(mm.sdd21), 1.0, atol=1e-12)
    np.testing.assert_allclose(abs(mm.scc21), 1.0, atol=1e-12)
    np.testing.assert_allclose(abs(mm.sdc21), 0.0, atol=1e-12)
    np.testing.assert_allclose(abs(mm.sdd11), 0.0, atol=1e-12)
    np.testing.assert_allclose(mm.freq_hz, FREQ.f)
    # modal reference impedances of uncoupled 50 ohm ports: Zdiff = 2 Z0, Zcomm = Z0 / 2 (Bockelman & Eisenstadt)
    assert (mm.z0_diff_ohm, mm.z0_comm_ohm) == (100.0, 25.0)


def test_skewed_pair_converts_half_the_difference_of_its_two_lines():
    """A pair whose N line is 3 mm longer: each line's own through, t_P and t_N, from scikit-rf; by the
    definitions, Sdd21 = Scc21 = (t_P + t_N) / 2 and Sdc21 = (t_P - t_N) / 2."""
    network = pair_of_lines(10.0, 13.0)
    t_p, t_n = network.s[:, 2, 0], network.s[:, 3, 1]
    mm = mixed_mode(network)
    np.testing.assert_allclose(mm.sdd21, (t_p + t_n) / 2, atol=1e-12)
    np.testing.assert_allclose(mm.scc21, (t_p + t_n) / 2, atol=1e-12)
    np.testing.assert_allclose(mm.sdc21, (t_p - t_n) / 2, atol=1e-12)
    assert abs(mm.sdc21).max() > 0.5  # the skew really converts: the check above can fail


def test_unbalanced_network_matches_the_mixed_mode_definitions():
    """Every single-ended term different (no symmetry, not even reciprocal), so a wrong pairing or a wrong sign
    in the port mapping shows in at least one of the five terms."""
    rng = np.random.default_rng(20261205)
    s = 0.4 * (rng.standard_normal((FREQ.npoints, 4, 4)) + 1j * rng.standard_normal((FREQ.npoints, 4, 4)))
    mm = mixed_mode(skrf.Network(frequency=FREQ, s=s, z0=50.0))

    def S(i, j):  # 1-based single-ended term
        return s[:, i - 1, j - 1]

    np.testing.assert_allclose(mm.sdd11, (S(1, 1) - S(1, 2) - S(2, 1) + S(2, 2)) / 2, rtol=0, atol=1e-12)
    np.testing.assert_allclose(mm.scc11, (S(1, 1) + S(1, 2) + S(2, 1) + S(2, 2)) / 2, rtol=0, atol=1e-12)
    np.testing.assert_allclose(mm.sdd21, (S(3, 1) - S(3, 2) - S(4, 1) + S(4, 2)) / 2, rtol=0, atol=1e-12)
    np.testing.assert_allclose(mm.scc21, (S(3, 1) + S(3, 2) + S(4, 1) + S(4, 2)) / 2, rtol=0, atol=1e-12)
    np.testing.assert_allclose(mm.sdc21, (S(3, 1) + S(3, 2) - S(4, 1) - S(4, 2)) / 2, rtol=0, atol=1e-12)
    # swapping P and N at both ends flips the sign of the mode conversion, and only that
    swapped = skrf.Network(frequency=FREQ, s=s[:, [1, 0, 3, 2]][:, :, [1, 0, 3, 2]], z0=50.0)
    np.testing.assert_allclose(mixed_mode(swapped).sdc21, -mm.sdc21, atol=1e-12)
    np.testing.assert_allclose(mixed_mode(swapped).scc21, mm.scc21, atol=1e-12)


def test_common_through_is_scikit_rf_scc21():
    """The corners' shortcut for Scc21 agrees with scikit-rf's full conversion (se2gmm) on an unbalanced,
    non-reciprocal 4-port, at 50 ohm and at the model's own reference."""
    rng = np.random.default_rng(5)
    s = 0.4 * (rng.standard_normal((FREQ.npoints, 4, 4)) + 1j * rng.standard_normal((FREQ.npoints, 4, 4)))
    for z0 in (50.0, 37.2):
        expected = mixed_mode(skrf.Network(frequency=FREQ, s=s, z0=z0)).scc21
        np.testing.assert_allclose(common_through(s), expected, rtol=0, atol=1e-12)


def test_mixed_mode_needs_a_four_port():
    media = lossless_media()
    with pytest.raises(EbgError, match="network ports = 2: .*4-port"):
        mixed_mode(media.line(5, "mm"))


def test_touchstone_is_byte_stable_documented_and_reads_back(tmp_path):
    network = pair_of_lines(10.0, 13.0)
    network.s[:, 0, 1] = network.s[:, 1, 0] = 0.05 - 0.02j  # some coupling, so every block carries data
    comments = ["source: model: test network", "spec: hx2_l0_tx_straight"]
    first = write_touchstone(network, tmp_path / "a.s4p", comments)
    second = write_touchstone(network, tmp_path / "b.s4p", comments)
    assert first.read_bytes() == second.read_bytes()
    text = first.read_text()
    assert "! port order: 1 = P near end (path start), 2 = N near end (path start), 3 = P far end" in text
    assert "! reference impedance: 50 ohm on every port" in text
    assert "! source: model: test network" in text
    assert "skrf" not in text.split("#")[0]  # no library version line: same bytes after an upgrade
    back = skrf.Network(str(first))  # scikit-rf's own Touchstone reader
    assert back.nports == 4
    np.testing.assert_allclose(back.f, network.f, rtol=0, atol=1e-3)
    np.testing.assert_allclose(back.s, network.s, rtol=0, atol=1e-9)
    np.testing.assert_allclose(back.z0, 50.0)


def test_touchstone_renormalises_to_r_ref_and_refuses_mixed_references(tmp_path):
    network = pair_of_lines(10.0, 10.0)
    text = touchstone_text(network, ["source: test"], r_ref=100.0)
    path = tmp_path / "r100.s4p"
    path.write_text(text)
    back = skrf.Network(str(path))
    # compared with scikit-rf's own renormalisation; a 50 ohm line between 100 ohm ports reflects
    # G = (Z0 - Zref) / (Z0 + Zref) = -1/3 at each end, |S11| peaking at 2|G| / (1 + G^2) = 0.6 where the line
    # is a quarter wave (Pozar, Microwave Engineering, 4th ed., multiple reflections of a line section, from memory)
    expected = network.copy()
    expected.renormalize(100.0)
    np.testing.assert_allclose(back.s, expected.s, atol=1e-9)
    assert 0.1 < abs(back.s[:, 0, 0]).max() <= 0.6 + 1e-9
    network.z0 = np.array([50.0, 50.0, 50.0, 45.0])
    with pytest.raises(EbgError, match="reference impedance: differs between ports"):
        touchstone_text(network, [])
    network.s[3, 0, 0] = np.nan
    with pytest.raises(EbgError, match="NaN"):
        touchstone_text(network, [], r_ref=50.0)
    assert not list(tmp_path.glob("*.tmp"))


def test_mode_impedances_renormalise_a_plain_line_to_matched():
    """Two uncoupled 60-ohm lines measured at 50-ohm ports: referred to the line's own mode impedances
    (differential 2 Z0odd = 120 ohm, common Z0even / 2 = 30 ohm; uncoupled lines have Z0odd = Z0even = Z0,
    Bockelman and Eisenstadt as above) both modes read matched and lossless through, while the default 100 / 25 ohm
    reference shows the mismatch ripple (a 60-ohm line between 50-ohm ports reflects up to
    2 |rho| / (1 + rho^2) with rho = 10 / 110, transmission-line theory)."""
    network = pair_of_lines(12.0, 12.0, z0=60.0)
    network.renormalize(50.0)
    plain = mixed_mode(network)
    assert np.abs(plain.sdd11).max() > 0.15 and np.abs(plain.scc11).max() > 0.15
    matched = mixed_mode(network, z0_diff_ohm=120.0, z0_comm_ohm=30.0)
    assert (matched.z0_diff_ohm, matched.z0_comm_ohm) == (120.0, 30.0)
    assert np.abs(matched.sdd11).max() < 1e-9 and np.abs(matched.scc11).max() < 1e-9
    assert np.abs(matched.sdd21) == pytest.approx(1.0, abs=1e-9)
    assert np.abs(matched.scc21) == pytest.approx(1.0, abs=1e-9)
