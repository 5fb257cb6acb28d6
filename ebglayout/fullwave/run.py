"""simulate(layout) -> a 4-port scikit-rf Network in the project's port order, from openEMS runs.

Excitation plans:
- ``half``: the cut and the pair are mirror-symmetric about the pair's centre line: the common mode runs on the
  y >= 0 half with a magnetic wall on the symmetry plane, the differential mode with an electric wall; the other
  trace's signals follow from the mirror (+ for common, - for differential).
- ``full``: the whole domain, driving both near ends together (common) and against each other (differential).
- ``single``: the whole domain, one port at a time (the naive plan; kept for the benchmark and cross-checks).
When the model is also mirror-symmetric end to end, the far-end excitations follow from the near-end ones
(ports 1 <-> 3, 2 <-> 4); otherwise they are run too.

From each run's port voltages V and currents I (into the traces) come power waves a = (V + Z0 I) / 2 sqrt(Z0),
b = (V - Z0 I) / 2 sqrt(Z0) at the reference Z0; with four independent excitations S = B A^-1.  The reference
is chosen freely afterwards, so the physical port resistors may match each mode while the result is stated at
50 ohm (equivalent to renormalising, e.g. with scikit-rf's ``renormalize``).
"""
from __future__ import annotations

import shutil
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

from ..errors import EbgError
from ..layout import Layout
from ..estimate.lines import microstrip_single, mode_reference_ohm, stripline_single
from .model import PRESETS, Model, build_model, half_model
from .openems import Progress, RunSignals, check_drawn, engine_version, find_engine, run_engine, spectrum

Z_REF = 50.0
"""Reference impedance of the reported single-ended S-parameters (ohm)."""
MIRROR_ALONG = {1: 3, 2: 4, 3: 1, 4: 2}


@dataclass(frozen=True)
class Drive:
    """One engine run: the model variant, which ports are driven with what amplitude, and how the absent
    trace's signals follow (``mirror`` +1 / -1 on a half domain, 0 on the full domain)."""

    name: str
    model: Model
    excite: dict
    mirror: int = 0


@dataclass
class FullwaveResult:
    """The 4-port network and what the run was."""

    network: object
    meta: dict = field(default_factory=dict)


def port_impedance(layout: Layout) -> float:
    """Characteristic impedance of one trace of the pair alone (closed form), used for the port resistors."""
    stack = layout.stackup
    w = layout.spec.pair_width
    if stack.stripline:
        b = stack.planes[0].pair.h + stack.planes[1].pair.h
        return stripline_single(w, b, stack.planes[0].pair.er).z0
    plane = stack.planes[0].pair
    return microstrip_single(w / plane.h, plane.er).z0


def mode_reference(layout: Layout) -> dict:
    """The mixed-mode reference impedances the results are stated at: differential 2 Z0odd and common Z0even / 2
    of the pair's lead-in (closed forms of estimate/lines.py), so a plain line reads matched in both modes and the
    lumped ports' single impedance leaves no standing-wave ripple on Scc21 and Sdd21."""
    differential, common = mode_reference_ohm(layout.stackup, layout.spec.pair_width, layout.spec.pair_spacing)
    return {"differential": differential, "common": common,
            "method": "scikit-rf se2gmm z0_mm: the 50-ohm single-ended S-parameters renormalised to the pair's "
                      "closed-form mode impedances (differential 2 Z0odd, common Z0even / 2)"}


def plan(model: Model, symmetry: str = "auto") -> list[Drive]:
    """The runs that give all four columns of S (see the module docstring)."""
    if symmetry == "auto":
        symmetry = "half" if model.symmetric_across else "full"
    if symmetry == "half" and not model.symmetric_across:
        raise EbgError("fullwave symmetry = half: the cut and pair are not mirror-symmetric about the pair's centre "
                       "line; use full")
    ends = ("near",) if model.symmetric_along else ("near", "far")
    drives = []
    for end in ends:
        if symmetry == "half":
            for mode, sign in (("even", 1), ("odd", -1)):
                half = half_model(model, mode)
                driven = next(p.number for p in half.ports if p.end == end)
                drives.append(Drive(f"{mode}-{end}", half, {driven: 1.0}, sign))
        elif symmetry == "full":
            p_port, n_port = (1, 2) if end == "near" else (3, 4)
            drives.append(Drive(f"common-{end}", model, {p_port: 1.0, n_port: 1.0}))
            drives.append(Drive(f"differential-{end}", model, {p_port: 1.0, n_port: -1.0}))
        elif symmetry == "single":
            for number in ((1, 2) if end == "near" else (3, 4)):
                drives.append(Drive(f"port{number}", model, {number: 1.0}))
        else:
            raise EbgError(f"fullwave symmetry = {symmetry!r}: allowed are auto, half, full, single")
    return drives


def port_waves(model: Model, drive: Drive, signals: RunSignals, freq_hz: np.ndarray) -> tuple[np.ndarray, ...]:
    """(V, I) per frequency and port 1-4 (arrays (nf, 4)) for one run, the mirrored trace filled in."""
    v = np.zeros((len(freq_hz), 4), dtype=complex)
    i = np.zeros_like(v)
    for number in signals.voltage:
        tv, ti = signals.time[number]
        v[:, number - 1] = spectrum(tv, signals.voltage[number], freq_hz)
        i[:, number - 1] = spectrum(ti, signals.current[number], freq_hz)
    if drive.mirror:
        for number in list(signals.voltage):
            partner = number + 1 if number % 2 else number - 1
            v[:, partner - 1] = drive.mirror * v[:, number - 1]
            i[:, partner - 1] = drive.mirror * i[:, number - 1]
    return v, i


def s_matrix(columns: list[tuple[np.ndarray, np.ndarray]], along: bool, z_ref: float = Z_REF) -> np.ndarray:
    """S (nf, 4, 4) at z_ref from runs' port (V, I); with ``along`` each run also gives its end-to-end mirror."""
    a_cols, b_cols = [], []
    for v, i in columns:
        a_cols.append((v + z_ref * i) / (2 * np.sqrt(z_ref)))
        b_cols.append((v - z_ref * i) / (2 * np.sqrt(z_ref)))
        if along:
            perm = [MIRROR_ALONG[k] - 1 for k in range(1, 5)]
            a_cols.append(a_cols[-1][:, perm])
            b_cols.append(b_cols[-1][:, perm])
    a = np.stack(a_cols, axis=2)  # (nf, port, excitation)
    b = np.stack(b_cols, axis=2)
    if a.shape[2] != 4:
        raise EbgError(f"fullwave: {a.shape[2]} independent excitations, 4 needed")
    return np.linalg.solve(np.transpose(a, (0, 2, 1)), np.transpose(b, (0, 2, 1))).transpose(0, 2, 1)


def frequency_grid(model: Model, points: int = 401) -> np.ndarray:
    """The coarse analysis grid: 5 % to 90 % of the excited band (the pulse's spectrum falls to -20 dB at its
    top, where the solve for S amplifies the engine's noise into false dips)."""
    return np.linspace(0.05 * model.f_max_hz, 0.9 * model.f_max_hz, points)


def refine_grid(freq: np.ndarray, curve_db: np.ndarray, step_hz: float = 2e6, span: float = 0.03) -> np.ndarray:
    """The coarse grid plus a fine one (``step_hz``) within +-``span`` of the deepest point (notches are < 1 %
    wide)."""
    notch = freq[int(np.argmin(curve_db))]
    fine = np.arange(notch * (1 - span), notch * (1 + span), step_hz)
    return np.unique(np.concatenate([freq, fine]))


def simulate(layout: Layout, preset: str = "default", threads: int = 2, time_limit: float | None = None,
             progress: Callable[[str, Progress], None] | None = None, keep: Path | None = None,
             symmetry: str = "auto", with_cut: bool = True, model: Model | None = None) -> FullwaveResult:
    """Run the full-wave check of a layout; return the 4-port (ports 1 P near, 2 N near, 3 P far, 4 N far) at
    Z_REF with metadata.  ``time_limit`` is in seconds for all runs together; ``keep`` keeps the run folder."""
    from ..sparams import mixed_mode

    if preset not in PRESETS:
        raise EbgError(f"fullwave --preset {preset!r}: allowed are {', '.join(PRESETS)}")
    find_engine()
    started = time.monotonic()
    deadline = started + time_limit if time_limit else None
    z_port = port_impedance(layout)
    model = model or build_model(layout, preset, port_ohm=z_port, with_cut=with_cut)
    drives = plan(model, symmetry)
    workdir = Path(keep) if keep else Path(tempfile.mkdtemp(prefix="ebglayout-fullwave-"))
    try:
        checks = {}
        for drive in drives:
            if drive.model.half not in checks:
                checks[drive.model.half] = check_drawn(drive.model, workdir / f"check-{drive.model.half or 'full'}",
                                                       threads)
        runs = []
        for drive in drives:
            report = (lambda state, name=drive.name: progress(name, state)) if progress else None
            runs.append((drive, run_engine(drive.model, drive.excite, workdir / drive.name, threads, deadline,
                                           report)))
        coarse = _network(frequency_grid(model), runs, model, layout.spec.name)
        ref = mode_reference(layout)
        scc21 = mixed_mode(coarse, ref["differential"], ref["common"]).scc21
        freq = refine_grid(coarse.f, 20 * np.log10(np.maximum(np.abs(scc21), 1e-15)))
        network = _network(freq, runs, model, layout.spec.name)
    finally:
        if not keep:
            shutil.rmtree(workdir, ignore_errors=True)
    meta = {
        "engine": f"openEMS {engine_version()}",
        "preset": model.preset.name,
        "symmetry": _plan_name(drives),
        "runs": [d.name for d in drives],
        "end_to_end_mirror": model.symmetric_along,
        "cells": [d.model.cells for d in drives],
        "time_steps": [sig.steps for _, sig in runs],
        "end_energy_db": [round(sig.end_energy_db, 1) for _, sig in runs],
        "record_cut_at_energy_growth": [sig.cut_at_growth for _, sig in runs],
        "wall_s": round(time.monotonic() - started, 1),
        "port_resistor_ohm": round(model.ports[0].feeds[0].resistance / len(model.ports[0].feeds), 2),
        "reference_ohm": Z_REF,
        "mode_reference_ohm": mode_reference(layout),
        "loss": f"dielectric conductivity fitted to tan d at {model.f_kappa_hz / 1e9:.2f} GHz; copper lossless",
        "f_max_hz": model.f_max_hz,
        "line_length_mm": round(model.port(3).feeds[0].x - model.port(1).feeds[0].x, 6),
        "with_cut": with_cut,
    }
    if keep:
        meta["run_folder"] = str(workdir)
    return FullwaveResult(network, meta)


def _plan_name(drives: list[Drive]) -> str:
    if drives[0].model.half:
        return "half domain, magnetic wall (common) / electric wall (differential)"
    if any(d.name.startswith("port") for d in drives):
        return "full domain, one port at a time"
    return "full domain, common and differential drives"


def _network(freq: np.ndarray, runs: list, model: Model, name: str):
    """The 4-port at Z_REF on a frequency grid, from every run's port signals."""
    import skrf

    s = s_matrix([port_waves(model, d, sig, freq) for d, sig in runs], model.symmetric_along)
    return skrf.Network(frequency=skrf.Frequency.from_f(freq, unit="Hz"), s=s, z0=Z_REF, name=name)


def output_names(name: str) -> list[str]:
    """Files of one full-wave check: Touchstone, result JSON, plot."""
    return [f"{name}.s4p", f"{name}.fullwave.json", f"{name}.fullwave.svg", f"{name}.fullwave.png"]


def fullwave_to_folder(layout: Layout, out_dir: Path, *, preset: str = "default", threads: int = 2,
                       time_limit: float | None = None, keep_run: bool = False, threshold_db: float = -10.0,
                       force: bool = False, progress=None, inputs: tuple = ()) -> dict:
    """Simulate a layout and write <name>.s4p, <name>.fullwave.json and the plot (SVG, PNG), all or nothing.

    Existing outputs (and outputs that are ``inputs``) are refused before the run starts; an error, the time
    limit or Ctrl-C leaves nothing behind.  ``keep_run`` keeps the engine's run folder as <name>.fullwave-run
    beside the outputs.  Returns the result JSON content."""
    from ..export.response_plot import write_response_plot
    from ..outputs import StagedOutputs
    from ..response import response_json, response_json_text
    from ..sparams import mixed_mode, touchstone_text

    name = layout.spec.name
    find_engine()
    with StagedOutputs(out_dir, force=force, inputs=inputs) as staged:
        staged.require_free(output_names(name))
        keep = Path(out_dir) / f"{name}.fullwave-run" if keep_run else None
        if keep is not None and keep.exists() and not force:
            raise EbgError(f"--keep-run {keep}: exists; pass --force to replace it")
        result = simulate(layout, preset, threads, time_limit, progress, keep)
        meta = result.meta
        source = f"full-wave: {meta['engine']} FDTD, preset {meta['preset']}"
        ref = meta["mode_reference_ohm"]
        data = response_json(mixed_mode(result.network, ref["differential"], ref["common"]), source=source, target_hz=layout.spec.target_hz,
                             threshold_db=threshold_db, extra={"fullwave": meta,
                                                               "stackup": layout.stackup.to_json()})
        comments = [f"source: {source}; {meta['symmetry']}", f"loss: {meta['loss']}",
                    "a simulation of the drawn geometry, not a compliance measurement"]
        staged.path(f"{name}.s4p").write_bytes(touchstone_text(result.network, comments, Z_REF).encode("ascii"))
        staged.write_text(f"{name}.fullwave.json", response_json_text(data))
        write_response_plot(data, staged.path(f"{name}.fullwave.svg"), staged.path(f"{name}.fullwave.png"), name)
    return data
