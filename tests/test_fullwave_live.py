"""Live openEMS runs on small cases (fast preset, about 2 minutes together on 2 cores).

The outside references: the Hammerstad-Jensen microstrip closed form for the lead-in's impedance, the dielectric
loss of a quasi-TEM line, scikit-rf's network algebra (passivity, reciprocity, mixed mode), and the engine itself
run on a second discretisation (half against full domain, coarse against fine slot mesh).
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from ebglayout.estimate.lines import microstrip_single
from ebglayout.fullwave.run import simulate
from ebglayout.layout import build_layout
from ebglayout.response import summarize
from ebglayout.sparams import mixed_mode
from ebglayout.spec import spec_from_dict

from conftest import SAMPLES


def _spec(**changes):
    """The straight sample with changes to its tables (a copy of its TOML data)."""
    import tomllib

    raw = tomllib.loads((SAMPLES / "hx2_l0_tx_straight.toml").read_text())
    for dotted, value in changes.items():
        table, key = dotted.split(".")
        raw[table][key] = value
    return spec_from_dict(raw, "hx2_l0_tx_straight")


@pytest.fixture(scope="module")
def one_cell_lossless(openems):
    """One lossless cell, fast preset, half domain (the symmetric plan)."""
    layout = build_layout(_spec(**{"cut.count": 1, "stackup.tan_d": 0.0}))
    return layout, simulate(layout, "fast", threads=2)


def _mode_z0(network, mode: str) -> np.ndarray:
    """Characteristic impedance of one mode's lead-in line from the mode 2-port's Z-parameters:
    Z0 = sqrt(Z11 * Z22 - Z12 * Z21) of a uniform line (transmission-line theory, any length)."""
    import skrf

    mm = network.copy()
    mm.se2gmm(p=2)
    idx = [0, 1] if mode == "differential" else [2, 3]
    two = skrf.Network(frequency=mm.frequency, s=mm.s[:, idx][:, :, idx], z0=mm.z0[:, idx])
    z = two.z
    return np.sqrt(z[:, 0, 0] * z[:, 1, 1] - z[:, 0, 1] * z[:, 1, 0])


def test_plain_line_impedance_and_loss(openems):
    """No cut, traces 1 mm apart (coupling negligible, so each mode sees one microstrip): the lead-in impedance
    from the port voltages and currents is within 3 % of Hammerstad-Jensen (differential = 2 Z0, common = Z0 / 2),
    and |Sdd21|, |Scc21| referred to that impedance are within 1 dB of the line's dielectric loss
    alpha_d = k0 er (eps_eff - 1) tan_d / (2 sqrt(eps_eff) (er - 1)) (Pozar, Microwave Engineering, microstrip
    attenuation due to dielectric loss; from memory)."""
    import skrf

    layout = build_layout(_spec(**{"pair.spacing": 0.88, "cut.count": 1}))
    result = simulate(layout, "fast", threads=2, with_cut=False)
    net = result.network
    f = net.f
    band = (f > 2e9) & (f < 0.9 * f.max())
    w, h, er, tan_d = 0.12, 0.1, 4.1, layout.stackup.planes[0].pair.tan_d
    z0 = microstrip_single(w / h, er).z0  # Hammerstad-Jensen (1980)
    for mode, expected in (("differential", 2 * z0), ("common", z0 / 2)):
        measured = np.median(np.real(_mode_z0(net, mode)[band]))
        assert measured == pytest.approx(expected, rel=0.03), mode
    eps_eff = microstrip_single(w / h, er).eeff
    length_m = (result.meta["line_length_mm"]) * 1e-3
    k0 = 2 * math.pi * f / 299792458.0
    alpha = k0 * er * (eps_eff - 1) * tan_d / (2 * math.sqrt(eps_eff) * (er - 1))
    loss_db = -20 * np.log10(np.exp(-alpha * length_m))
    mm = net.copy()
    mm.se2gmm(p=2)
    for mode, idx, zmode in (("differential", (0, 1), 2 * z0), ("common", (2, 3), z0 / 2)):
        two = skrf.Network(frequency=mm.frequency, s=mm.s[:, list(idx)][:, :, list(idx)], z0=mm.z0[:, list(idx)])
        two.renormalize(zmode)
        s21_db = 20 * np.log10(np.abs(two.s[:, 1, 0]))
        assert np.all(np.abs(s21_db[band] + loss_db[band]) < 1.0), mode


def test_coupled_plain_line_reads_matched_at_the_mode_impedances(openems):
    """No cut, the pair as tightly coupled as the sample (0.12 / 0.15 mm at 0.1 mm): referred to the closed-form
    mode impedances (differential 2 Z0odd, common Z0even / 2 from Kirschning-Jansen, estimate/lines.py) the lead-in
    reflects little in both modes (|Sdd11|, |Scc11| at most -15 dB below 0.9 f_max), less than at the plain
    2 Z0 / Z0 / 2 of the lumped ports' single impedance (transmission-line theory: a matched reference removes the
    mismatch the single port impedance leaves on a coupled pair's two modes)."""
    from ebglayout.fullwave.run import mode_reference

    layout = build_layout(_spec(**{"cut.count": 1}))
    result = simulate(layout, "fast", threads=2, with_cut=False)
    net, f = result.network, result.network.f
    band = (f > 2e9) & (f < 0.9 * f.max())
    ref = mode_reference(layout)
    matched = mixed_mode(net, ref["differential"], ref["common"])
    z_port = result.meta["port_resistor_ohm"]
    single = mixed_mode(net, 2 * z_port, z_port / 2)
    for term in ("sdd11", "scc11"):
        worst = 20 * np.log10(np.abs(getattr(matched, term))[band].max())
        assert worst <= -15, term
        assert worst < 20 * np.log10(np.abs(getattr(single, term))[band].max()), term


def test_passive_and_reciprocal(openems):
    """A passive reciprocal structure: singular values of S at most 1 (+0.02) and S = S^T within 0.02 at every
    frequency (network theory).  Run on the full domain with common and differential drives, so reciprocity is
    not built in by the mirror, and with the stack-up's loss, so the record ends with the field gone."""
    layout = build_layout(_spec(**{"cut.count": 1}))
    result = simulate(layout, "fast", threads=2, symmetry="full")
    assert not any(result.meta["record_cut_at_energy_growth"])
    s = result.network.s
    assert np.linalg.svd(s, compute_uv=False).max() <= 1.02
    assert np.abs(s - s.transpose(0, 2, 1)).max() <= 0.02


def test_half_domain_agrees_with_full_domain(one_cell_lossless):
    """The symmetric half-domain runs (magnetic/electric wall) and a full-domain run with common and differential
    drives put the notch within 1 % of each other (the same engine on a second, independent excitation)."""
    layout, half = one_cell_lossless
    full = simulate(layout, "fast", threads=2, symmetry="full")
    assert full.meta["symmetry"].startswith("full")
    notch = [summarize(r.network.f, 20 * np.log10(np.abs(mixed_mode(r.network).scc21))).notch_hz
             for r in (half, full)]
    assert notch[1] == pytest.approx(notch[0], rel=0.01)


def test_slot_mesh_convergence(one_cell_lossless):
    """Refining the slot mesh (2 -> 4 cells across the slot, and the trace with it) moves the notch by under 1 %
    (a second discretisation of the same drawing)."""
    from dataclasses import replace

    from ebglayout.fullwave.model import PRESETS, build_model
    from ebglayout.fullwave.run import port_impedance

    layout, coarse = one_cell_lossless
    finer = replace(PRESETS["fast"], slot_cells=4, trace_cells=4)
    model = build_model(layout, finer, port_ohm=port_impedance(layout))
    fine = simulate(layout, "fast", threads=2, model=model)
    notch = [summarize(r.network.f, 20 * np.log10(np.abs(mixed_mode(r.network).scc21))).notch_hz
             for r in (coarse, fine)]
    assert notch[1] == pytest.approx(notch[0], rel=0.01)
    assert fine.meta["cells"][0] > coarse.meta["cells"][0]


def test_drawn_check_catches_a_broken_trace(openems, tmp_path, sample_layouts):
    """The engine's own PEC dump shows a trace cut in two (as a staircased jog would be) and the run is refused
    before it starts; the intact model passes the same check."""
    from dataclasses import replace

    from shapely.geometry import box

    from ebglayout.fullwave.model import Sheet, build_model, hole_free
    from ebglayout.fullwave.openems import check_drawn
    from ebglayout.fullwave.pec_check import DrawnCheckFailed

    model = build_model(sample_layouts["hx2_l0_tx_straight"], "fast")
    assert check_drawn(model, tmp_path / "intact")["pec_edges"] > 0
    traces = next(s for s in model.sheets if s.name == "traces")
    gap = box(0.0, -5, 0.6, 5)
    broken = Sheet("traces", traces.z, tuple(q for p in traces.polygons for q in hole_free(p.difference(gap))))
    sheets = tuple(broken if s.name == "traces" else s for s in model.sheets)
    with pytest.raises(DrawnCheckFailed, match="separate pieces"):
        check_drawn(replace(model, sheets=sheets), tmp_path / "broken")


def test_drawn_check_catches_a_slot_closed_by_the_mesh(openems, tmp_path, sample_layouts):
    """Without mesh lines on a slot's edges the engine snaps the copper across the slot; the dump check sees
    copper inside the drawn slot and refuses."""
    from dataclasses import replace

    from ebglayout.fullwave.model import build_model
    from ebglayout.fullwave.openems import check_drawn
    from ebglayout.fullwave.pec_check import DrawnCheckFailed

    model = build_model(sample_layouts["hx2_l0_tx_straight"], "fast")
    mx, my, mz = model.mesh
    xs = sorted(v for axis, v in model.slot_edges if axis == "x")[:2]
    keep = np.ones(len(mx), bool)
    for a in xs:
        keep &= np.abs(mx - a) > 1e-6
    keep &= ~((mx > xs[0]) & (mx < xs[1]))
    coarse = replace(model, mesh=(mx[keep], my, mz))
    with pytest.raises(DrawnCheckFailed):
        check_drawn(coarse, tmp_path / "closed")
