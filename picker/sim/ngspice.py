"""Run ngspice in batch mode on a deck and measure oscillator waveforms.

The simulator runs as a subprocess (``ngspice -b deck.cir``) in a scratch
directory; transient results come back through ``wrdata`` (one time column,
a header row), operating points through an ASCII raw file (16 significant
digits).  :func:`measure_oscillation` turns a (non-uniformly sampled) record
into start-up, bursting, settling, frequency and amplitude figures.

References
----------
Peak detection: ``scipy.signal.find_peaks``.  Frequency from linearly
interpolated zero crossings and the spectral peak of a Hann-windowed record
refined by a parabola through the log magnitudes: common practice (no source).
"""

from __future__ import annotations

import shutil
import subprocess
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy.signal import find_peaks

from picker.circuit import envelope, spice
from picker.circuit.envelope import BURST_HIGH
from picker.errors import PickerError

NOT_INSTALLED = "ngspice is not installed; on Debian/Ubuntu: apt-get install ngspice"
#: Lines of ngspice's output quoted in an error message.
TAIL_LINES = 4

#: A record whose peak-to-peak is below this share of its magnitude (or of 1 V) is flat.
FLAT_REL = 1e-12
#: Envelope below this fraction of its maximum counts as no signal (before the kick).
SIGNIFICANT = 1e-3
#: Cycles over which the early growth per cycle is fitted.
EARLY_CYCLES = 10
#: Growth of the envelope over the record (after the kick) that counts as started.
START_FACTOR = 3.0
#: Early growth per cycle that counts as started if the envelope has not died by the end.
START_GROWTH = 0.01
#: Share of the record used for frequency and amplitude when it neither settles nor bursts.
FALLBACK_SHARE = 0.25
#: Periods over which the envelope is averaged before it is classified (settles / bursts).
SMOOTH_PERIODS = 8
#: Within a burst, the flat part is where the envelope is at least this share of the burst's maximum.
BURST_FLAT = 0.9
#: A burst's flat part shorter than this many periods is widened to BURST_HIGH of its maximum.
MIN_FLAT_PERIODS = 5


# -- running the simulator ------------------------------------------------------

def find_ngspice() -> str | None:
    """Path of the ``ngspice`` executable, or None when it is not on PATH."""
    return shutil.which("ngspice")


def _tail(text: str) -> str:
    lines = [ln.strip() for ln in text.splitlines() if ln.strip()]
    return " | ".join(lines[-TAIL_LINES:]) or "no output"


def _run(text: str, workdir, timeout_s: float, out_file: str) -> str:
    exe = find_ngspice()
    if exe is None:
        raise PickerError(NOT_INSTALLED)
    with tempfile.TemporaryDirectory(prefix="picker-ngspice-") as tmp:
        wd = Path(workdir) if workdir is not None else Path(tmp)
        wd.mkdir(parents=True, exist_ok=True)
        (wd / "deck.cir").write_text(text)
        out = wd / out_file
        out.unlink(missing_ok=True)
        try:
            proc = subprocess.run([exe, "-b", "deck.cir"], cwd=wd, capture_output=True,
                                  text=True, timeout=timeout_s)
        except subprocess.TimeoutExpired:
            raise PickerError(f"ngspice did not finish within {timeout_s:g} s") from None
        log = proc.stderr if proc.stderr.strip() else proc.stdout
        if proc.returncode != 0:
            raise PickerError(f"ngspice failed (exit {proc.returncode}): {_tail(log)}")
        if not out.exists():
            raise PickerError(f"ngspice wrote no {out_file}: {_tail(log)}")
        return out.read_text()


def run_deck(text: str, *, workdir=None, timeout_s: float = 300,
             out_file: str = "picker_out.txt") -> dict[str, np.ndarray]:
    """Run a deck whose control block ends in ``wrdata <out_file> ...`` and ``quit``.

    Parameters
    ----------
    text : str
        The deck.
    workdir : path-like, optional
        Directory to run in (kept); default a scratch directory that is removed.
    timeout_s : float
        Wall-clock limit, second.
    out_file : str
        The file the deck's ``wrdata`` writes.

    Returns
    -------
    dict
        Column name as ngspice writes it, lower case (``time``, ``v(t)``) -> array.
    """
    return read_wrdata(_run(text, workdir, timeout_s, out_file))


def read_wrdata(text: str) -> dict[str, np.ndarray]:
    """Parse ``wrdata`` output written with ``wr_singlescale`` and ``wr_vecnames``.

    Complex vectors (an ``.ac`` sweep) come back as complex arrays.
    """
    lines = text.splitlines()
    if not lines:
        raise PickerError("ngspice wrote an empty data file")
    names = [n.lower() for n in lines[0].split()]
    data = np.loadtxt(lines[1:], ndmin=2)
    if data.shape[1] != len(names):
        raise PickerError(f"ngspice data has {data.shape[1]} columns for {len(names)} names")
    out: dict[str, np.ndarray] = {}
    i = 0
    while i < len(names):  # a complex vector comes as two columns of one name: re, im
        if i + 1 < len(names) and names[i + 1] == names[i]:
            out[names[i]] = data[:, i] + 1j * data[:, i + 1]
            i += 2
        else:
            out[names[i]] = data[:, i]
            i += 1
    return out


def read_raw_ascii(text: str) -> dict[str, np.ndarray]:
    """Parse an ASCII raw file (``set filetype=ascii`` then ``write``) of real data."""
    lines = text.splitlines()
    starts = [i for i, ln in enumerate(lines) if ln.strip() in ("Variables:", "Values:")]
    if len(starts) != 2 or lines[starts[0]].strip() != "Variables:":
        raise PickerError("ngspice raw file has no Variables/Values sections")
    head = "\n".join(lines[:starts[0]]).lower()
    if "flags:" in head and "complex" in head:
        raise PickerError("ngspice raw file holds complex data; only real data is read")
    names = [ln.split()[1].lower() for ln in lines[starts[0] + 1:starts[1]] if len(ln.split()) >= 2]
    values = " ".join(lines[starts[1] + 1:])
    nums = np.array(values.split(), dtype=float)
    width = len(names) + 1  # each point starts with its index
    if not names or nums.size % width:
        raise PickerError("ngspice raw file is truncated")
    table = nums.reshape(-1, width)[:, 1:]
    return {n: table[:, i] for i, n in enumerate(names)}


def run_op(text: str, *, workdir=None, timeout_s: float = 60,
           out_file: str = "picker_out.txt") -> dict[str, float]:
    """Run an operating-point deck (``op`` then ``write`` of an ASCII raw file).

    Returns
    -------
    dict
        Vector name, lower case (``v(b)``, ``i(vcc)``) -> value in volt or
        ampere.  A source's current is SPICE's branch current, positive
        from its + node through the source, so a supply delivering current
        reads negative.
    """
    return {k: float(v[0]) for k, v in read_raw_ascii(_run(text, workdir, timeout_s, out_file)).items()}


# -- measuring waveforms -------------------------------------------------------

@dataclass(frozen=True)
class WaveformMeasure:
    """What a transient record says about an oscillator (SI units).

    ``growth_per_cycle`` is the envelope's ratio from one cycle to the next
    fitted over the first cycles after the kick (below 1: decays).  The
    envelope is peak-to-peak, at the times of the record's extremes.
    """

    started: bool
    growth_per_cycle: float
    bursts: bool
    burst_count: int
    burst_period_s: float | None
    settle_time_s: float | None
    freq_hz: float
    amplitude_vpp: float
    window_s: tuple[float, float]
    envelope_t_s: np.ndarray = field(repr=False, compare=False)
    envelope_vpp: np.ndarray = field(repr=False, compare=False)
    cycle_spread: float = float("nan")


def _clean(t_s, v) -> tuple[np.ndarray, np.ndarray]:
    t = np.asarray(t_s, dtype=float).ravel()
    x = np.asarray(v, dtype=float).ravel()
    if t.shape != x.shape or t.size < 16:
        raise PickerError(f"a waveform needs matching time and value arrays of 16 samples or more "
                          f"(got {t.size} and {x.size})")
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(x))):
        raise PickerError("waveform holds non-finite samples")
    keep = np.concatenate(([True], np.diff(t) > 0))  # drop repeated time points
    return t[keep], x[keep]


def dominant_freq_hz(t_s, v, f_guess_hz: float | None = None) -> float:
    """Frequency of the strongest spectral line (Hann window, parabola on log magnitude), hertz.

    Without a guess the search range is set by the spectrum of the first
    difference (which plays down slow drifts of the mean): from 0.2 to 1.2
    times its peak, so a strong harmonic cannot win.
    """
    t, x = _clean(t_s, v)
    n = int(min(max(t.size, 1024), 2**20))
    tu = np.linspace(t[0], t[-1], n)
    dt = tu[1] - tu[0]
    xu = np.interp(tu, t, x)
    xu -= xu.mean()
    f = np.fft.rfftfreq(n, dt)
    mag = np.abs(np.fft.rfft(xu * np.hanning(n)))
    if f_guess_hz is not None:
        lo, hi = 0.5 * f_guess_hz, 2.0 * f_guess_hz
    else:
        dmag = np.abs(np.fft.rfft(np.diff(xu) * np.hanning(n - 1)))
        fd = np.fft.rfftfreq(n - 1, dt)
        fpk = fd[1 + int(np.argmax(dmag[1:]))]
        lo, hi = 0.2 * fpk, 1.2 * fpk
    band = np.flatnonzero((f >= lo) & (f <= hi) & (f > 0))
    if band.size == 0:
        raise PickerError("waveform is too short to find its frequency")
    k = band[int(np.argmax(mag[band]))]
    if 0 < k < mag.size - 1:
        a, b, c = np.log(np.maximum(mag[k - 1:k + 2], 1e-300))
        den = a - 2 * b + c
        shift = 0.5 * (a - c) / den if den < 0 else 0.0
        return float((k + np.clip(shift, -0.5, 0.5)) * (f[1] - f[0]))
    return float(f[k])


def running_mean(t: np.ndarray, x: np.ndarray, width_s: float) -> np.ndarray:
    """Centred moving average over ``width_s`` (trapezoid integral; shortened at the ends)."""
    cum = np.concatenate(([0.0], np.cumsum(0.5 * (x[1:] + x[:-1]) * np.diff(t))))
    a = np.clip(t - width_s / 2, t[0], t[-1])
    b = np.clip(t + width_s / 2, t[0], t[-1])
    return (np.interp(b, t, cum) - np.interp(a, t, cum)) / (b - a)


def _vertex(t: np.ndarray, y: np.ndarray, idx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Time and value of the parabola through samples idx-1, idx, idx+1 (non-uniform steps)."""
    idx = idx[(idx > 0) & (idx < t.size - 1)]
    h0, h2 = t[idx - 1] - t[idx], t[idx + 1] - t[idx]
    d0, d2 = y[idx - 1] - y[idx], y[idx + 1] - y[idx]
    det = h0 * h2 * (h0 - h2)
    a = (d0 * h2 - d2 * h0) / det
    b = (h0**2 * d2 - h2**2 * d0) / det
    ok = a < 0
    safe_a = np.where(ok, a, -1.0)
    dx = np.where(ok, np.clip(-b / (2 * safe_a), h0, h2), 0.0)
    val = np.where(ok, y[idx] - b**2 / (4 * safe_a), y[idx])
    return t[idx] + dx, np.maximum(val, y[idx])


def envelope_vpp(t_s, v, period_s: float) -> tuple[np.ndarray, np.ndarray]:
    """Peak-to-peak envelope of ``v`` about its one-period running mean.

    Maxima and minima (``find_peaks``, refined by a parabola) of ``v`` minus
    its running mean give an upper and a lower envelope, each interpolated
    linearly to the times of all extremes; the envelope is their sum.
    Extremes within half a period of either end (where the running mean is
    one-sided) are left out.

    Returns
    -------
    t_s, vpp : ndarray
        Times, second, and envelope, volt (or the unit of ``v``).
    """
    t, x = _clean(t_s, v)
    w = x - running_mean(t, x, period_s)
    inner = (t >= t[0] + period_s / 2) & (t <= t[-1] - period_s / 2)
    hi, _ = find_peaks(w, height=0.0)
    lo, _ = find_peaks(-w, height=0.0)
    thi, vhi = _vertex(t, w, hi[inner[hi]])
    tlo, vlo = _vertex(t, -w, lo[inner[lo]])
    if thi.size < 2 or tlo.size < 2:
        raise PickerError("waveform has fewer than two cycles to measure")
    te = np.union1d(thi, tlo)
    return te, np.interp(te, thi, vhi) + np.interp(te, tlo, vlo)


def rising_crossings(t: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Times where ``w`` crosses zero upwards, linearly interpolated, second."""
    i = np.flatnonzero((w[:-1] < 0) & (w[1:] >= 0))
    return t[i] - w[i] * (t[i + 1] - t[i]) / (w[i + 1] - w[i])


def measure_oscillation(t_s, v, *, f_guess_hz: float | None = None) -> WaveformMeasure:
    """Measure a kicked oscillator's transient record.

    Parameters
    ----------
    t_s : array_like
        Sample times, second (need not be uniform).
    v : array_like
        Voltage at the probed node, volt.
    f_guess_hz : float, optional
        Expected frequency, hertz; the spectral search then looks from half
        to twice this value.

    Notes
    -----
    * The period for the running mean comes from the spectral peak.
    * The reference point is one period after the envelope first exceeds
      ``SIGNIFICANT`` of its maximum (the kick).  ``started``: the envelope
      later grows to ``START_FACTOR`` times its value there, or it grows by
      ``START_GROWTH`` per cycle over the first ``EARLY_CYCLES`` cycles and is
      no smaller at the end.
    * The envelope is averaged over ``SMOOTH_PERIODS`` periods before it is
      classified (:func:`picker.circuit.envelope.classify`); ``cycle_spread``
      is the unsmoothed envelope's peak-to-peak over the steady window
      relative to the amplitude (alternating cycles show up here).
    * ``bursts``: after having reached ``BURST_HIGH`` of its maximum, the
      envelope falls below ``BURST_LOW`` and climbs back at least once;
      ``burst_period_s`` is the median spacing of collapses (or of rises when
      only one collapse was seen).
    * Frequency (rising zero crossings of ``v`` minus its running mean) and
      amplitude (median envelope) are taken over the steady window: from the
      settle time to the end; in a bursting record the flat part of the last
      complete burst; otherwise the last ``FALLBACK_SHARE`` of the record.
    """
    t, x = _clean(t_s, v)
    if np.ptp(x) <= FLAT_REL * max(1.0, float(np.max(np.abs(x)))):
        return WaveformMeasure(  # nothing moves: no oscillation to measure
            started=False, growth_per_cycle=float("nan"), bursts=False, burst_count=0,
            burst_period_s=None, settle_time_s=None, freq_hz=float("nan"),
            amplitude_vpp=float(np.ptp(x)), window_s=(float(t[0]), float(t[-1])),
            envelope_t_s=np.empty(0), envelope_vpp=np.empty(0))
    period = 1.0 / dominant_freq_hz(t, x, f_guess_hz)
    w = x - running_mean(t, x, period)
    te, env = envelope_vpp(t, x, period)
    peak = float(env.max())
    first = te[np.argmax(env >= SIGNIFICANT * peak)]
    t_ref = min(first + period, te[-1])
    a_ref = float(np.interp(t_ref, te, env))
    t_end = te[-1]

    early = (te >= t_ref) & (te <= t_ref + EARLY_CYCLES * period)
    if np.count_nonzero(early) >= 3:
        slope = np.polyfit(te[early], np.log(np.maximum(env[early], 1e-300)), 1)[0]
        growth = float(np.exp(slope * period))
    else:
        growth = float("nan")
    late_peak = float(env[te >= t_ref].max())
    started = bool(late_peak >= START_FACTOR * a_ref
                   or (growth >= 1 + START_GROWTH and env[-1] >= a_ref))

    # classify a cycle-smoothed envelope: a steady waveform whose alternate cycles differ
    # (period doubling under hard saturation) holds still on a scope; bursts take hundreds of cycles
    env_smooth = running_mean(te, env, SMOOTH_PERIODS * period)
    cls = envelope.classify(te, env_smooth, t_ref, period)
    falls, rises, bursts, settle = cls.falls_s, cls.rises_s, cls.bursts, cls.settle_time_s
    span = t_end - t_ref

    if settle is not None:
        window = (settle, t_end)
    elif bursts:
        window = _last_burst_window(te, env, falls, rises, period)
    else:
        window = (t_end - FALLBACK_SHARE * span, t_end)
    window = (window[0], min(window[1], t[-1] - period))

    inwin = (te >= window[0]) & (te <= window[1])
    amp = float(np.median(env[inwin])) if np.any(inwin) else float("nan")
    spread = float(np.ptp(env[inwin]) / amp) if np.any(inwin) and amp > 0 else float("nan")
    tc = rising_crossings(t, w)
    tc = tc[(tc >= window[0]) & (tc <= window[1])]
    freq = float((tc.size - 1) / (tc[-1] - tc[0])) if tc.size >= 3 else float("nan")
    return WaveformMeasure(
        started=started, growth_per_cycle=growth, bursts=bursts, burst_count=cls.burst_count,
        burst_period_s=cls.burst_period_s, settle_time_s=settle, freq_hz=freq, amplitude_vpp=amp,
        window_s=(float(window[0]), float(window[1])), envelope_t_s=te, envelope_vpp=env,
        cycle_spread=spread,
    )


def _last_burst_window(te, env, falls, rises, period) -> tuple[float, float]:
    """Flat part of the last burst that ends in a collapse."""
    f_last = falls[-1]
    r = rises[rises < f_last]
    r_last = r[-1] if r.size else te[0]
    sel = (te >= r_last) & (te <= f_last)
    top = env[sel].max()
    flat = te[sel][env[sel] >= BURST_FLAT * top]
    if flat[-1] - flat[0] < MIN_FLAT_PERIODS * period:  # a spike, not a plateau
        flat = te[sel][env[sel] >= BURST_HIGH * top]
    return float(flat[0]), float(flat[-1])


# -- small-signal loop gain ------------------------------------------------------

def loop_gain(design, fstart_hz: float, fstop_hz: float, points: int, *,
              method: str = "injection", hfe: float | None = None,
              timeout_s: float = 60) -> tuple[np.ndarray, np.ndarray]:
    """Small-signal loop gain of ``design`` at its transistor's input pin, by ngspice.

    Parameters
    ----------
    design : picker.circuit.design.Design
        The oscillator.
    fstart_hz, fstop_hz : float
        Sweep limits, hertz.
    points : int
        Points per decade.
    method : {"injection", "break"}
        ``injection``: Middlebrook's voltage and current injection with the
        loop closed (two runs, exact for the linearised circuit); ``break``:
        the loop cut at the pin and loaded with a copy of the transistor's
        stage (one run; see :func:`picker.circuit.spice.deck_ac_open_loop`).
    hfe : float, optional
        hFE of the model card (default: the profile's nominal).

    Returns
    -------
    freq_hz, gain : ndarray
        Frequencies, hertz, and the complex loop gain (start-up needs
        magnitude > 1 where its phase is zero).
    """
    ret, drv = (f"v({n.lower()})" for n in spice.open_loop_nodes(design))
    args = (design, fstart_hz, fstop_hz, points)
    if method == "break":
        r = run_deck(spice.deck_ac_open_loop(*args, hfe=hfe), timeout_s=timeout_s)
        return r["frequency"].real, r[ret] / r[drv]
    if method != "injection":
        raise ValueError(f"method must be 'injection' or 'break' (got {method!r})")
    rv = run_deck(spice.deck_ac_injection(*args, hfe=hfe), timeout_s=timeout_s)
    ri = run_deck(spice.deck_ac_injection(*args, inject="current", hfe=hfe), timeout_s=timeout_s)
    return rv["frequency"].real, middlebrook_gain(rv[ret] / rv[drv], ri["i(vm)"])


def middlebrook_gain(gv, i_pin):
    """Loop gain from a voltage and a current injection at one point of a closed loop.

    Parameters
    ----------
    gv : array_like
        Voltage loop gain: returned-side over driven-side voltage with a
        series source (AC 1) between them.
    i_pin : array_like
        Current into the driven side with a unit current injected at the
        junction; the current loop gain is Gi = (i_pin - 1) / i_pin.

    Returns
    -------
    ndarray
        (Gv Gi - 1) / (Gv + Gi - 2): Middlebrook's combination written for a
        loop whose gain is +1 at the edge of oscillation.

    References
    ----------
    R. D. Middlebrook, "Measurement of loop gain in feedback systems",
    Int. J. Electronics 38(4), 1975.
    """
    gv = np.asarray(gv)
    i_pin = np.asarray(i_pin)
    gi = (i_pin - 1.0) / i_pin
    return (gv * gi - 1.0) / (gv + gi - 2.0)


def phase_zero(freq_hz: np.ndarray, gain: np.ndarray) -> list[tuple[float, float]]:
    """(frequency, |gain|) where the phase of ``gain`` crosses zero, linearly interpolated.

    Crossings through +-180 degrees (phase wrapping) are left out.
    """
    f = np.asarray(freq_hz, dtype=float)
    ph = np.angle(gain)
    k = np.flatnonzero((np.sign(ph[:-1]) != np.sign(ph[1:])) & (np.abs(ph[:-1]) < np.pi / 2))
    fz = f[k] - ph[k] * (f[k + 1] - f[k]) / (ph[k + 1] - ph[k])
    mag = np.interp(fz, f, np.abs(gain))
    return [(float(a), float(b)) for a, b in zip(fz, mag)]
