"""Circuit model of the drawn filter: cavity modal expansion, symmetry, reciprocity, passivity, the plain line.

References outside ebglayout:
- the parallel-plate line: a cavity fed by ports spanning its full width at x = 0 and x = a is a TEM line of
  impedance Z0 = eta h / (b sqrt(er)), so Z11 = -j Z0 cot(beta a) and Z21 = -j Z0 / sin(beta a) (D. M. Pozar,
  Microwave Engineering, 4th ed., sec. 2.3 and 4.2: an open-ended line and the line's Z-matrix; from memory);
- the parallel-plate capacitor C = e0 er A / h for the cavity's low-frequency port impedance 1 / (j w C);
- the cavity model's modes, f_mn = c sqrt((m/a)^2 + (n/b)^2) / (2 sqrt(er)) (Balanis,
  Antenna Theory, 3rd ed., sec. 14.2.2, from memory);
- reciprocity (S = S^T) and passivity (I - S^H S positive semi-definite) of any network of passive reciprocal
  parts (Pozar, sec. 4.3);
- a matched uniform line transmits |S21| = exp(-alpha l) (Pozar, sec. 2.7), with alpha from the named forms;
- scikit-rf computes the mixed-mode terms (ebglayout.sparams).
"""
from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from shapely.geometry import MultiPolygon, box

from ebglayout.bundled import samples_folder
from ebglayout.estimate.cavity import C0, _numeric_port_modes, port_modes
from ebglayout.estimate.lines import pair_lines
from ebglayout.estimate.network import filter_network
from ebglayout.layout import build_layout, with_copper
from ebglayout.response import db20, summarize
from ebglayout.sparams import mixed_mode
from ebglayout.spec import load_spec, spec_from_dict

EPS0 = 8.8541878128e-12
ETA0 = 376.730313668


def _full_width_ports(a: float, b: float):
    return [((0.0, 0.0), (0.0, b)), ((a, 0.0), (a, b))]


@pytest.mark.parametrize("numeric", [False, True])
def test_full_width_ports_see_the_parallel_plate_line(numeric):
    a, b, er, h = 3.0, 2.0, 4.0, 0.1
    freq = np.array([3e9, 9e9, 16e9, 21e9])
    ports = _full_width_ports(a, b)
    k_keep = 3 * 2 * math.pi * freq.max() * math.sqrt(er) / C0 * 1e-3
    if numeric:
        modes = _numeric_port_modes(box(0, 0, a, b), np.array(ports, float), k_keep, 0.005)
    else:
        modes = port_modes(box(0, 0, a, b), ports, k_keep)
    z = modes.impedance(freq, er, h, 0.0)
    beta = 2 * math.pi * freq * math.sqrt(er) / C0
    z0 = ETA0 * (h / b) / math.sqrt(er)
    tol = 0.02 if numeric else 5e-3  # the closed form's tail is summed to 240 modes per axis
    assert z[:, 0, 0].imag == pytest.approx(-z0 / np.tan(beta * a * 1e-3), rel=tol, abs=0.02)
    assert z[:, 1, 0].imag == pytest.approx(-z0 / np.sin(beta * a * 1e-3), rel=tol, abs=0.02)
    assert np.allclose(z, np.transpose(z, (0, 2, 1)))


def test_low_frequency_port_impedance_is_the_plate_capacitance():
    a, b, er, h = 3.0, 2.0, 4.1, 0.1
    modes = port_modes(box(0, 0, a, b), [((0.0, 0.9), (0.0, 1.1))], 10.0)
    f = np.array([1e6])
    z = modes.impedance(f, er, h, 0.0)[0, 0, 0]
    c = EPS0 * er * a * b * 1e-6 / (h * 1e-3)
    assert z.imag == pytest.approx(-1 / (2 * math.pi * f[0] * c), rel=1e-3)


def test_numeric_modes_match_the_closed_form_rectangle():
    a, b = 3.0, 2.0
    ports = [((0.0, 0.9), (0.0, 1.1)), ((3.0, 0.9), (3.0, 1.1)), ((1.5, 2.0), (1.6, 2.0))]
    exact = port_modes(box(0, 0, a, b), ports, 3.0)
    numeric = _numeric_port_modes(box(0, 0, a, b), np.array(ports, float), 3.0, 0.005)
    assert len(exact.k2) == len(numeric.k2)
    assert np.sqrt(numeric.k2) == pytest.approx(np.sqrt(exact.k2), rel=1e-3)
    # phi of degenerate-free modes up to sign; the port coupling phi_i phi_j is sign-free
    assert np.einsum("ki,kj->kij", numeric.phi, numeric.phi) == pytest.approx(
        np.einsum("ki,kj->kij", exact.phi, exact.phi), abs=5e-3)
    # the quasi-static tail between distinct ports converges; a self term resolves the port's width only to the
    # numeric grid, hence the looser bound there
    off = ~np.eye(3, dtype=bool)
    assert numeric.tail[0][off] == pytest.approx(exact.tail[0][off], abs=2e-3)
    assert np.diag(numeric.tail[0]) == pytest.approx(np.diag(exact.tail[0]), rel=0.2)


def test_common_mode_leaves_a_mode_odd_about_the_pair_alone():
    # a 2 x 3 mm patch with the pair crossing its 2 mm sides at y = 1.5 +- 0.135: TM01 (odd about the pair's centre
    # line) is the lowest mode, and equal currents at P and N cannot excite it; a lane off centre can
    a, b = 2.0, 3.0
    on_centre = [((0.0, 1.5 + d - 0.06), (0.0, 1.5 + d + 0.06)) for d in (0.135, -0.135)]
    off_centre = [((0.0, 2.2 + d - 0.06), (0.0, 2.2 + d + 0.06)) for d in (0.135, -0.135)]
    for ports, expect_common in ((on_centre, False), (off_centre, True)):
        modes = port_modes(box(0, 0, a, b), ports, 3.0)
        lowest = int(np.argmin(modes.k2))
        assert math.sqrt(modes.k2[lowest]) == pytest.approx(math.pi / b, rel=1e-9)
        common = modes.phi[lowest, 0] + modes.phi[lowest, 1]
        differential = modes.phi[lowest, 0] - modes.phi[lowest, 1]
        assert abs(differential) > 0.05
        assert (abs(common) > 0.05) == expect_common


def _aspect_spec(along: float, across: float) -> dict:
    return {"name": "aspect", "target": "30GHz",
            "pair": {"width": 0.12, "spacing": 0.15, "path": [[0, 0], [12, 0]]},
            "cut": {"patch": [along, across], "count": 3, "slot": 0.15, "web": 0.3},
            "stackup": {"er": 4.1, "h": 0.1, "tan_d": 0.0}}


def test_patch_wider_across_notches_at_the_along_mode():
    # 2.2 mm along x 2.86 mm across (aspect 1.3): the across mode TM01 lies below the along mode TM10; the common
    # mode's notch must sit near TM10, not at TM01
    along, across = 2.2, 2.86
    layout = build_layout(spec_from_dict(_aspect_spec(along, across)))
    f01 = C0 / (2 * across * 1e-3 * math.sqrt(4.1))
    f10 = C0 / (2 * along * 1e-3 * math.sqrt(4.1))
    freq = np.linspace(0.7 * f01, 1.2 * f10, 1500)
    mm = mixed_mode(filter_network(layout, freq))
    notch = summarize(freq, db20(mm.scc21)).notch_hz
    assert abs(notch / f10 - 1) < 0.05
    near_f01 = np.abs(freq / f01 - 1) < 0.01
    assert db20(mm.scc21)[near_f01].min() > -3.0


def _sample(name: str):
    return build_layout(load_spec(samples_folder() / f"{name}.toml"))


@pytest.mark.parametrize("name", ["hx2_l0_tx_straight", "hx2_l2_tx_bridged"])
def test_network_is_reciprocal_and_passive(name):
    layout = _sample(name)
    freq = np.linspace(1e9, 25e9, 97)
    s = filter_network(layout, freq).s
    assert np.allclose(s, np.transpose(s, (0, 2, 1)), atol=1e-9)
    for k in range(len(freq)):
        loss = np.eye(4) - s[k].conj().T @ s[k]
        assert np.linalg.eigvalsh((loss + loss.conj().T) / 2).min() > -1e-9


def test_no_cut_gives_the_plain_line():
    layout = _sample("hx2_l0_tx_straight")
    empty = MultiPolygon()
    bare = with_copper(layout, cuts=tuple(replace(c, slot=empty, patch=empty, bridge=empty, outline=empty)
                                          for c in layout.cuts))
    lines = pair_lines(layout.stackup, layout.spec.pair_width, layout.spec.pair_spacing)
    freq = np.array([1e9, 5e9, 12e9])
    length = layout.centreline.length * 1e-3
    # matched to the common mode (single-ended z0 = Z0e: common reference Z0e / 2) and to the differential one
    scc = mixed_mode(filter_network(bare, freq, z0_ohm=lines.even.z0)).scc21
    sdd = mixed_mode(filter_network(bare, freq, z0_ohm=lines.odd.z0)).sdd21
    assert np.abs(scc) == pytest.approx(np.exp(-lines.gamma(freq, "even").real * length), rel=1e-9)
    assert np.abs(sdd) == pytest.approx(np.exp(-lines.gamma(freq, "odd").real * length), rel=1e-9)
    assert np.angle(scc) == pytest.approx(np.angle(np.exp(-1j * lines.gamma(freq, "even").imag * length)),
                                          abs=1e-6)


def test_bad_frequencies_are_refused():
    from ebglayout.errors import EbgError

    with pytest.raises(EbgError, match="freq_hz"):
        filter_network(_sample("hx2_l0_tx_straight"), [0.0, 1e9])
