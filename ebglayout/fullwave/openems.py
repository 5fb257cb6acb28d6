"""A full-wave Model -> openEMS: CSXCAD XML written here, the ``openEMS`` executable run on it, port signals back.

Why XML and the executable rather than Debian's Python modules: those modules are compiled for Debian's numpy
1.24 and do not load beside the numpy 2 this project installs; their port helpers also use aliases numpy
removed.  The executable reads one XML file, so the project needs no compiled binding, and the engine runs in
its own process, which a time limit or Ctrl-C can end cleanly.
"""
from __future__ import annotations

import math
import os
import re
import shutil
import signal
import subprocess
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable
from xml.sax.saxutils import quoteattr

import numpy as np

from ..errors import EbgError
from ..physics import C0
from .model import Model

GROWTH_DB = 10.0
"""Field energy rising this far above its lowest value (itself this far below the peak) stops the run."""
INSTALL_HINT = "apt-get install openems python3-openems (Debian/Ubuntu)"


class EngineMissing(EbgError):
    """openEMS is not installed."""


class EngineFailed(EbgError):
    """openEMS stopped with an error or did not write its port signals."""


class TimeLimit(EbgError):
    """The run went past its time limit and was stopped."""


def find_engine() -> str:
    """Path of the openEMS executable, or EngineMissing naming what to install."""
    exe = os.environ.get("EBGLAYOUT_OPENEMS") or shutil.which("openEMS")
    if not exe:
        raise EngineMissing(f"openEMS: executable not found on PATH; install it ({INSTALL_HINT})")
    return exe


def engine_version(exe: str | None = None) -> str:
    """The version the engine prints in its banner (e.g. "0.0.35"), read from a run with no arguments."""
    exe = exe or find_engine()
    out = subprocess.run([exe], capture_output=True, text=True, timeout=30).stdout
    found = re.search(r"version\s+v?([0-9][0-9A-Za-z.\-+~]*)", out)
    return found.group(1) if found else "unknown"


def time_step(model: Model) -> float:
    """The FDTD time step (s) of the model's mesh by the Courant limit on its smallest cells (what openEMS's
    default method gives to within a few percent)."""
    d = [np.diff(m).min() * 1e-3 for m in model.mesh]
    return 1.0 / (C0 * math.sqrt(sum(1.0 / x**2 for x in d)))


def _fmt(v: float) -> str:
    return f"{float(v):.9g}"


def _box(p1, p2, priority: int = 0) -> str:
    return (f'<Box Priority="{priority}"><P1 X="{_fmt(p1[0])}" Y="{_fmt(p1[1])}" Z="{_fmt(p1[2])}"/>'
            f'<P2 X="{_fmt(p2[0])}" Y="{_fmt(p2[1])}" Z="{_fmt(p2[2])}"/></Box>')


def _polygon(poly, z: float, priority: int) -> str:
    pts = list(poly.exterior.coords)[:-1]
    verts = "".join(f'<Vertex X1="{_fmt(x)}" X2="{_fmt(y)}"/>' for x, y in pts)
    return (f'<Polygon Priority="{priority}" Elevation="{_fmt(z)}" NormDir="2" QtyVertices="{len(pts)}">'
            f'{verts}</Polygon>')


def probe_names(port_number: int, feed_index: int) -> tuple[str, str]:
    return f"port_ut{port_number}_{feed_index}", f"port_it{port_number}_{feed_index}"


def model_xml(model: Model, excite: dict[int, float], steps: int, end_db: float) -> str:
    """The openEMS input file: FDTD settings (Gaussian pulse over 0..f_max, end criterion, boundaries) and the
    CSXCAD structure (slabs, copper sheets, lumped ports, port probes).  ``excite`` maps port number ->
    amplitude; every other port is a passive load."""
    f_half = 0.5 * model.f_max_hz
    x0, x1, y0, y1, z0, z1 = model.domain
    bc = dict(zip(("xmin", "xmax", "ymin", "ymax", "zmin", "zmax"), model.boundaries))
    props = []
    ident = 0

    def prop(tag: str, name: str, attrs: str, body: str, extra: str = "") -> None:
        nonlocal ident
        props.append(f'<{tag} ID="{ident}" Name={quoteattr(name)} {attrs}><Primitives>{body}</Primitives>'
                     f'{extra}</{tag}>')
        ident += 1

    for slab in model.slabs:
        kappa = slab.kappa(model.f_kappa_hz)
        prop("Material", slab.name, 'Isotropy="1"', _box((x0, y0, slab.z0), (x1, y1, slab.z1), 1),
             f'<Property Epsilon="{_fmt(slab.er)}" Mue="1" Kappa="{_fmt(kappa)}" Sigma="0"/>')
    for sheet in model.sheets:
        prop("Metal", sheet.name, "", "".join(_polygon(p, sheet.z, 10) for p in sheet.polygons))
    for port in model.ports:
        amp = excite.get(port.number, 0.0)
        for k, feed in enumerate(port.feeds):
            p1 = (feed.x, feed.y0, feed.z_plane)
            p2 = (feed.x, feed.y1, feed.z_trace)
            direction = 1.0 if feed.z_trace > feed.z_plane else -1.0
            prop("LumpedElement", f"port_R{port.number}_{k}", f'Direction="2" Caps="1" R="{_fmt(feed.resistance)}"',
                 _box(p1, p2, 5))
            if amp:
                prop("Excitation", f"port_exc{port.number}_{k}",
                     f'Number="0" Type="0" Excite="0,0,{_fmt(-direction * amp)}"', _box(p1, p2, 5))
            u_name, i_name = probe_names(port.number, k)
            xm, ym, zm = feed.x, 0.5 * (feed.y0 + feed.y1), 0.5 * (feed.z_plane + feed.z_trace)
            prop("ProbeBox", u_name, f'Number="0" Type="0" Weight="{_fmt(-direction)}"',
                 _box((xm, ym, feed.z_plane), (xm, ym, feed.z_trace)))
            prop("ProbeBox", i_name, f'Number="0" Type="1" NormDir="2" Weight="{_fmt(direction)}"',
                 _box((feed.x, feed.y0, zm), (feed.x, feed.y1, zm)))
    mx, my, mz = model.mesh
    lines = "".join(f'<{a}Lines Qty="{len(m)}">{",".join(_fmt(v) for v in m)}</{a}Lines>'
                    for a, m in zip("XYZ", (mx, my, mz)))
    end = 10 ** (end_db / 10.0)
    return (
        '<?xml version="1.0" encoding="UTF-8"?>\n<openEMS>\n'
        f'<FDTD NumberOfTimesteps="{steps}" endCriteria="{end:.3e}" f_max="{_fmt(model.f_max_hz)}">\n'
        f'<Excitation Type="0" f0="{_fmt(f_half)}" fc="{_fmt(f_half)}"/>\n'
        f'<BoundaryCond {" ".join(f"{k}={quoteattr(v)}" for k, v in bc.items())}/>\n</FDTD>\n'
        '<ContinuousStructure CoordSystem="0">\n'
        f'<RectilinearGrid DeltaUnit="0.001" CoordSystem="0">{lines}</RectilinearGrid>\n'
        '<BackgroundMaterial Epsilon="1" Mue="1" Kappa="0" Sigma="0"/>\n<Properties>\n'
        + "\n".join(props) + '\n</Properties>\n</ContinuousStructure>\n</openEMS>\n')


@dataclass
class Progress:
    """What the engine last reported: time step reached, of how many, and the energy below its peak (dB)."""

    step: int = 0
    total: int = 0
    energy_db: float = 0.0


_PROGRESS = re.compile(r"Timestep:\s*(\d+).*?Energy:\s*~?\s*([0-9.eE+\-]+)\s*\(\s*-?\s*([0-9.]+)\s*dB\)")


@dataclass(frozen=True)
class RunSignals:
    """Per port number: time-domain voltage and current records (the feeds combined) and the run's facts."""

    time: dict
    voltage: dict
    current: dict
    steps: int
    end_energy_db: float
    wall_s: float
    cut_at_growth: bool = False
    """The field energy grew again late in the run (a known late-time instability of absorbing walls around
    lossless resonators); the record was stopped and cut at its lowest energy."""


def run_engine(model: Model, excite: dict[int, float], folder: Path, threads: int, deadline: float | None,
               progress: Callable[[Progress], None] | None = None) -> RunSignals:
    """Write the model, run openEMS on it in ``folder`` and read back every port's signals.

    ``deadline`` is a time.monotonic() value; past it the engine is stopped and TimeLimit raised.  Ctrl-C stops
    the engine too (KeyboardInterrupt propagates)."""
    exe = find_engine()
    folder.mkdir(parents=True, exist_ok=True)
    dt = time_step(model)
    steps = int(math.ceil(model.preset.max_time_ns * 1e-9 / dt))
    (folder / "model.xml").write_text(model_xml(model, excite, steps, model.preset.end_db), encoding="utf-8")
    state = Progress(total=steps)
    lowest = (0.0, 0)  # (energy dB, step) after the pulse has left
    growth = False
    started = time.monotonic()
    log = open(folder / "engine.log", "w", encoding="utf-8")
    # line-buffered through stdbuf where it exists: the engine's status lines then arrive as written
    line_buffered = [shutil.which("stdbuf"), "-oL"] if shutil.which("stdbuf") else []
    proc = subprocess.Popen([*line_buffered, exe, "model.xml", f"--numThreads={threads}"], cwd=folder,
                            stdout=subprocess.PIPE,
                            stderr=subprocess.STDOUT, text=True, bufsize=1, start_new_session=True)
    try:
        for line in proc.stdout:
            log.write(line)
            hit = _PROGRESS.search(line)
            if hit:
                state.step, state.energy_db = int(hit.group(1)), -float(hit.group(3))
                if progress:
                    progress(state)
                if state.energy_db < lowest[0]:
                    lowest = (state.energy_db, state.step)
                elif lowest[0] < -GROWTH_DB and state.energy_db > lowest[0] + GROWTH_DB:
                    growth = True  # late-time growth: the record after the lowest energy is not physical
                    break
            if deadline is not None and time.monotonic() > deadline:
                raise TimeLimit("fullwave --time-limit: reached before openEMS finished; give more minutes or a "
                                "faster --preset")
        code = 0 if growth else proc.wait()
    finally:
        if proc.poll() is None:
            _stop(proc)
        log.close()
    if code != 0:
        raise EngineFailed(f"openEMS: exited with code {code}; see {folder / 'engine.log'}")
    text = (folder / "engine.log").read_text(encoding="utf-8", errors="replace")
    if growth:
        found = re.search(r"timestep is:\s*([0-9.eE+\-]+)", text)
        step_s = float(found.group(1)) if found else dt
        state.step, state.energy_db = lowest[1], lowest[0]
        return _read_signals(model, folder, state, time.monotonic() - started, cut_s=lowest[1] * step_s)
    hits = _PROGRESS.findall(text)
    if hits:
        state.step, state.energy_db = int(hits[-1][0]), -float(hits[-1][2])
    return _read_signals(model, folder, state, time.monotonic() - started)


def _stop(proc: subprocess.Popen) -> None:
    """End the engine process (and only it: it runs in its own session)."""
    try:
        os.killpg(proc.pid, signal.SIGTERM)
        proc.wait(timeout=10)
    except (ProcessLookupError, subprocess.TimeoutExpired):
        try:
            os.killpg(proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        proc.wait()


def _read_signals(model: Model, folder: Path, state: Progress, wall: float, cut_s: float | None = None
                  ) -> RunSignals:
    times, volts, amps = {}, {}, {}
    for port in model.ports:
        us, its = [], []
        for k in range(len(port.feeds)):
            u_name, i_name = probe_names(port.number, k)
            try:
                u, i = _probe(folder / u_name, cut_s), _probe(folder / i_name, cut_s)
            except OSError as err:
                raise EngineFailed(f"openEMS: port {port.number} signals missing ({err}); see "
                                   f"{folder / 'engine.log'}") from err
            n = min(len(x) for x in (*us, *its, u, i))
            us, its = [x[:n] for x in (*us, u)], [x[:n] for x in (*its, i)]
        times[port.number] = (us[0][:, 0], its[0][:, 0])
        volts[port.number] = np.mean([u[:, 1] for u in us], axis=0)
        amps[port.number] = np.sum([i[:, 1] for i in its], axis=0)
    return RunSignals(times, volts, amps, state.step, state.energy_db, wall, cut_s is not None)


def _probe(path: Path, cut_s: float | None) -> np.ndarray:
    """A probe file's (time, value) rows, without a last line the stopped engine left half written, up to cut_s."""
    rows = [line.split() for line in path.read_text(encoding="ascii", errors="replace").splitlines()
            if line and not line.startswith("%")]
    data = np.array([[float(a), float(b)] for a, b in (r[:2] for r in rows if len(r) >= 2)]).reshape(-1, 2)
    if cut_s is not None:
        data = data[data[:, 0] <= cut_s]
    if len(data) < 4:
        raise EngineFailed(f"openEMS: {path.name} holds no usable record")
    return data


def spectrum(t: np.ndarray, x: np.ndarray, freq_hz: np.ndarray) -> np.ndarray:
    """Discrete Fourier transform of a sampled record at arbitrary frequencies (sum of x e^{-j 2 pi f t} dt)."""
    dt = t[1] - t[0]
    out = np.empty(len(freq_hz), dtype=complex)
    for k0 in range(0, len(freq_hz), 256):
        f = freq_hz[k0:k0 + 256]
        out[k0:k0 + 256] = np.exp(-2j * np.pi * np.outer(f, t)) @ x * dt
    return out


def check_drawn(model: Model, folder: Path, threads: int = 1) -> dict:
    """Set the model up in the engine without running it, read the engine's own PEC dump, and refuse (one-line
    EbgError) unless every trace is one connected piece of copper from port to port and every slot edge of the
    drawing lies on a mesh line where the engine put copper on one side and none on the other."""
    from .pec_check import check_pec_dump

    exe = find_engine()
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "model.xml").write_text(model_xml(model, {}, 100000, -30.0), encoding="utf-8")
    out = subprocess.run([exe, "model.xml", "--debug-PEC", "--no-simulation", f"--numThreads={threads}"],
                         cwd=folder, capture_output=True, text=True, timeout=600)
    dumps = sorted(folder.glob("PEC_dump.vt*"))
    if not dumps:  # the engine exits with 1 after a setup-only run, so the dump itself is the sign of success
        raise EngineFailed(f"openEMS: setup of the model failed (code {out.returncode}); nothing run")
    return check_pec_dump(model, dumps[0])
