"""The impedance felt at the robot's hand under each controller variant of a scenario (``exosandbox impedance``).

For every variant, the robot runs alone (``mode="exo_alone"``) with a :class:`~sim.physics.fixture.HandFixture`
in the wearer's place at its hand cuff, imposing a small motion along a direction; from the logged force of the
fixture on the robot and the velocity of the held cuff point, both along the direction, the impedance is
estimated (:func:`sim.analysis.impedance.h1_impedance`), fitted with :math:`m s + b + k / s`
(:func:`~sim.analysis.impedance.fit_impedance`) and its transparency bandwidth found
(:func:`~sim.analysis.impedance.transparency_bandwidth_Hz`).  :func:`write_impedance` writes ``impedance.csv``,
``bode.png`` and ``report.md``.
"""

from __future__ import annotations

import csv
import dataclasses
import time
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from models.errors import ParameterError
from sim.analysis.impedance import (
    DEFAULT_THRESHOLD_N_S_PER_M,
    ImpedanceFit,
    fit_impedance,
    h1_impedance,
    transparency_bandwidth_Hz,
)
from sim.loop.scenario import Scenario
from sim.loop.simulation import Progress, Simulation
from sim.physics.fixture import HandFixture, Multisine
from sim.physics.intent import JointIntent

__all__ = ["FeltImpedance", "felt_impedance", "impedance_record", "write_impedance", "DEFAULT_SETTLE_S",
           "DEFAULT_PERIODS", "DRIFT_WARN_RAD"]

#: Time left out at the start of each run [s], rounded up to whole periods of a multisine: the start transient
#: (the robot's and the controller's states settle in the periodic motion; common practice).
DEFAULT_SETTLE_S = 1.0
#: Periods of a multisine analysed after the settling time when no duration is given (4 averages; our choice).
DEFAULT_PERIODS = 4


@dataclass(frozen=True)
class FeltImpedance:
    """The impedance felt under one controller variant.

    Attributes
    ----------
    variant : str
    freq_Hz : (n,) ndarray [Hz]
        The analysed frequencies (a multisine's lines, or the Welch bins in the band).
    Z : (n,) complex ndarray [N s/m]
    coherence : (n,) ndarray
    fit : ImpedanceFit or None
        None when too few points reach the coherence threshold (``fit_error`` says why).
    bandwidth_Hz : float or None
        The transparency bandwidth (0.0: the lowest reliable line already reaches the threshold);
        ``bandwidth_open`` when |Z| stayed under the threshold over the whole band.
    threshold_N_s_per_m : float
    run_time_s : float
        Wall-clock time of the run [s] (this machine's, not a property of the controller).
    min_coherence : float
    posture_drift_rad : float
        The largest distance of a joint from its start angle over the run [rad]: the impedance is that of the
        start posture only while it stays small (an unpowered robot under gravity hangs on the fixture).
    """

    variant: str
    freq_Hz: np.ndarray
    Z: np.ndarray
    coherence: np.ndarray
    fit: ImpedanceFit | None
    fit_error: str | None
    bandwidth_Hz: float | None
    bandwidth_open: bool
    threshold_N_s_per_m: float
    run_time_s: float
    min_coherence: float = 0.9
    posture_drift_rad: float = 0.0


def impedance_record(arrays, fixture: HandFixture, dt_s: float, *, settle_s: float = DEFAULT_SETTLE_S,
                     band_Hz: tuple[float, float] | None = None):
    """The H1 impedance of a fixture run's logged arrays: (freq_Hz, Z, coherence) along the fixture's direction.

    The force is ``fixture_force_N`` (on the robot) and the velocity ``fixture_cuff_velocity_m_s`` (of the held
    cuff point), both projected on the direction; the first ``settle_s`` [s] are left out.  With a
    :class:`~sim.physics.fixture.Multisine`, the segments are whole periods (rectangular window, no overlap)
    and only its lines are kept; otherwise 4 s Hann segments with half overlap, the bins in ``band_Hz``.
    """
    u = fixture.unit
    F = np.asarray(arrays["fixture_force_N"]) @ u
    V = np.asarray(arrays["fixture_cuff_velocity_m_s"]) @ u
    fs = 1.0 / dt_s
    motion = fixture.motion
    if isinstance(motion, Multisine):
        period = motion.period_s
        start = int(round(np.ceil(settle_s / period - 1e-9) * period * fs))
        n_per = int(round(period * fs))
        n = (len(F) - start) // n_per * n_per
        if n < n_per:
            raise ParameterError(f"the run is too short: it must last the settling time ({settle_s} s, rounded up "
                                 f"to whole periods) plus at least one period of the multisine ({period} s)")
        freq, Z, coh = h1_impedance(F[start:start + n], V[start:start + n], fs, segment_s=period, overlap=0.0,
                                    window="boxcar")
        keep = np.isin(np.round(freq / motion.resolution_Hz).astype(int),
                       np.round(motion.frequencies_Hz / motion.resolution_Hz).astype(int)) & (freq > 0)
    else:
        start = int(round(settle_s * fs))
        freq, Z, coh = h1_impedance(F[start:], V[start:], fs, segment_s=min(4.0, (len(F) - start) / fs))
        lo, hi = band_Hz if band_Hz is not None else getattr(motion, "band_Hz", (0.0, np.inf))
        keep = (freq >= lo) & (freq <= hi) & (freq > 0)
    return freq[keep], Z[keep], coh[keep]


def felt_impedance(scenario: Scenario, controllers: Sequence[str], fixture: HandFixture | None = None, *,
                   duration_s: float | None = None, settle_s: float = DEFAULT_SETTLE_S,
                   threshold_N_s_per_m: float = DEFAULT_THRESHOLD_N_S_PER_M, min_coherence: float = 0.9,
                   seed: int | None = None, progress: Progress | None = None,
                   through_wearer: bool = False) -> list[FeltImpedance]:
    """Run ``scenario`` under each of ``controllers`` with ``fixture`` at the hand; the impedance felt under each.

    Parameters
    ----------
    scenario : Scenario
        Its robot, drives, sensors, control period and plant settings; its duration is replaced.
    controllers : sequence of str
        Variant names (the scenario's own or built-in).
    fixture : HandFixture, optional
        Default: a :class:`~sim.physics.fixture.Multisine` of 5 mm peak over 0.5-20 Hz along world x.
    duration_s : float, optional
        Simulated time per variant [s]; default: the settling time (whole periods) plus
        :data:`DEFAULT_PERIODS` periods of a multisine, 20 s otherwise.
    settle_s : float
        Time left out at the start [s].
    threshold_N_s_per_m, min_coherence : float
        Of the transparency bandwidth and of the fit (points with coherence below are left out).
    through_wearer : bool
        The fixture holds the wearer's hand point and moves the robot through the wearer, strapped in as usual
        (a coupled run); the wearer's intent then holds the scenario's start posture (no movement of their
        own), so Z is what the fixture feels of the wearer's arm and the robot together.  Default: the robot
        alone, the fixture at its hand cuff.
    """
    fixture = HandFixture() if fixture is None else fixture
    if not controllers:
        raise ParameterError("felt_impedance needs at least one controller variant")
    if duration_s is None:
        if isinstance(fixture.motion, Multisine):
            p = fixture.motion.period_s
            duration_s = (np.ceil(settle_s / p - 1e-9) + DEFAULT_PERIODS) * p
        else:
            duration_s = settle_s + 20.0
    run_scenario = dataclasses.replace(scenario, duration_s=float(duration_s))
    if through_wearer:  # the wearer holds still at the start posture while the fixture moves their hand
        run_scenario = dataclasses.replace(run_scenario, intent=JointIntent(scenario.intent.start_rad, ()))
    band = getattr(fixture.motion, "band_Hz", None)
    results = []
    for name in controllers:
        t0 = time.perf_counter()
        sim = Simulation(run_scenario, name, seed=seed, mode="coupled" if through_wearer else "exo_alone",
                         fixture=fixture)
        traj = sim.run(progress=progress)
        run_time = time.perf_counter() - t0
        freq, Z, coh = impedance_record(traj.arrays, fixture, run_scenario.control_period_s, settle_s=settle_s,
                                        band_Hz=band)
        try:
            fit, err = fit_impedance(freq, Z, coh, min_coherence), None
        except ParameterError as e:
            fit, err = None, str(e)
        try:
            bw = transparency_bandwidth_Hz(freq, Z, coh, threshold_N_s_per_m, min_coherence)
            reliable = freq[coh >= min_coherence]
            bw_open = bool(reliable.size) and bw == float(reliable[-1]) and \
                np.all(np.abs(Z[coh >= min_coherence]) < threshold_N_s_per_m)
        except ParameterError:
            bw, bw_open = None, False
        results.append(FeltImpedance(name, freq, Z, coh, fit, err, bw, bool(bw_open), float(threshold_N_s_per_m),
                                     run_time, float(min_coherence), _drift(traj.arrays["q_exo"])))
    return results


#: Posture drift above which the report warns [rad] (0.1 rad, about 6 deg; our choice).
DRIFT_WARN_RAD = 0.1


def _drift(q: np.ndarray) -> float:
    q = np.asarray(q)
    return float(np.max(np.abs(q - q[0]))) if len(q) else 0.0


def _f(x, digits: int = 3) -> str:
    return "n/a" if x is None or not np.isfinite(x) else f"{x:.{digits}g}"


def summary_rows(results: Sequence[FeltImpedance]) -> tuple[list[str], list[list[str]]]:
    """The table of the report: one row per variant (header, rows as text)."""
    header = ["variant", "felt mass m [kg]", "damping b [N s/m]", "stiffness k [N/m]", "R²",
              "transparency bandwidth [Hz]", "coherence (fitted points)", "fitted band [Hz]", "posture drift [rad]"]
    rows = []
    for r in results:
        reliable = r.freq_Hz[r.coherence >= r.min_coherence]
        if r.bandwidth_Hz is None:
            bw = "n/a"
        elif r.bandwidth_open:
            bw = f"≥ {r.bandwidth_Hz:.3g}"
        elif r.bandwidth_Hz == 0.0 and reliable.size:
            bw = f"< {reliable[0]:.3g}"  # the lowest reliable line already reaches the threshold
        else:
            bw = f"{r.bandwidth_Hz:.3g}"
        if r.fit is None:
            rows.append([r.variant, "n/a", "n/a", "n/a", "n/a", bw, "n/a", "n/a", f"{r.posture_drift_rad:.3f}"])
            continue
        ft = r.fit
        rows.append([r.variant, _f(ft.mass_kg), _f(ft.damping_N_s_per_m), _f(ft.stiffness_N_per_m), f"{ft.r2:.3f}",
                     bw, f"{ft.coherence_range[0]:.3f}–{ft.coherence_range[1]:.3f}",
                     f"{ft.band_Hz[0]:.3g}–{ft.band_Hz[1]:.3g}", f"{r.posture_drift_rad:.3f}"])
    return header, rows


__all__ += ["summary_rows"]


def write_impedance(results: Sequence[FeltImpedance], out: str | Path, *, scenario_name: str,
                    fixture: HandFixture, min_coherence: float = 0.9, through_wearer: bool = False
                    ) -> dict[str, Path]:
    """Write ``impedance.csv``, ``bode.png`` and ``report.md`` into ``out``; return their paths by name."""
    from sim.output.bode_plot import bode
    from sim.output.report import CAUTION, markdown_table

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    csv_path = out / "impedance.csv"
    with csv_path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["variant", "freq_Hz", "Z_magnitude_N_s_per_m", "Z_phase_deg", "coherence",
                    "fit_magnitude_N_s_per_m", "fit_phase_deg"])
        for r in results:
            zf = r.fit.impedance(r.freq_Hz) if r.fit is not None else np.full(r.freq_Hz.shape, np.nan + 0j)
            for f, z, c, m in zip(r.freq_Hz, r.Z, r.coherence, zf):
                w.writerow([r.variant, f"{f:.6g}", f"{abs(z):.6g}", f"{np.degrees(np.angle(z)):.6g}", f"{c:.6g}",
                            f"{abs(m):.6g}", f"{np.degrees(np.angle(m)):.6g}"])
    u = ", ".join(f"{x:.3g}" for x in fixture.direction)
    motion = fixture.motion
    title = f"{scenario_name}: impedance felt at the hand along ({u})" + (", through the wearer" if through_wearer
                                                                          else ", robot alone")
    curves = {r.variant: (r.freq_Hz, r.Z, r.coherence, r.fit.impedance(r.freq_Hz) if r.fit is not None else None)
              for r in results}
    png = bode(curves, out / "bode.png", title=title, min_coherence=min_coherence,
               threshold_N_s_per_m=results[0].threshold_N_s_per_m if results else None)
    header, rows = summary_rows(results)
    where = ("The wearer strapped in as usual, holding still, a fixture at the wearer's hand point"
             if through_wearer else f"The robot alone, a fixture in the wearer's place at its `{fixture.cuff}` cuff")
    lines = [f"# Felt impedance at the hand: {scenario_name}", "",
             f"{where} imposing "
             f"{type(motion).__name__} motion ({_motion_text(motion)}) along ({u}) in the world frame, "
             f"sideways {fixture.lateral}; coupling {fixture.stiffness_N_per_m:g} N/m, "
             f"{fixture.damping_N_s_per_m:g} N s/m. Z = F / V with F the fixture's force and V the "
             f"held point's velocity, both along the direction (H1 estimate, Welch averaging); model "
             f"Z(s) = m s + b + k/s fitted where the coherence is at least {min_coherence}.", "",
             markdown_table(header, rows), "",
             f"Transparency bandwidth: the frequency up to which |Z| stays below "
             f"{results[0].threshold_N_s_per_m if results else DEFAULT_THRESHOLD_N_S_PER_M:g} N s/m "
             "(default 12.5 N s/m: a 1 kg mass at 2 Hz, about the wearer's own forearm and hand at the upper "
             "end of daily arm movements; our choice). \"≥\" marks a bandwidth above the analysed band.", "",
             "![Bode plot of the felt impedance](bode.png)", "",
             "Run times (this machine's, not the controller's): "
             + ", ".join(f"{r.variant} {r.run_time_s:.1f} s" for r in results) + ".", ""]
    for r in results:
        if r.fit_error:
            lines += [f"- {r.variant}: no fit: {r.fit_error}"]
        elif r.fit.r2 < 0.9:
            lines += [f"- {r.variant}: the mass-damper-spring model fits poorly (R² = {r.fit.r2:.2f} < 0.9): the "
                      "felt impedance is not that of a mass, a damper and a spring over the band (a controller's "
                      "own dynamics, friction at small speeds), so read the Bode plot rather than m, b, k."]
        if r.posture_drift_rad > DRIFT_WARN_RAD:
            lines += [f"- {r.variant}: the posture drifted by up to {r.posture_drift_rad:.2f} rad from the start "
                      "(a robot that does not hold itself up hangs on the fixture): the impedance is not that of "
                      "the start posture."]
        if r.fit is not None and r.fit.n_points < len(r.freq_Hz):
            lines += [f"- {r.variant}: {len(r.freq_Hz) - r.fit.n_points} of {len(r.freq_Hz)} lines below the "
                      f"coherence threshold {min_coherence} were left out of the fit (hollow markers)."]
    lines += ["- Joint friction is simulated as viscous plus smoothed Coulomb friction (PlantParams): at the "
              "small speeds of a few-millimetre motion the smoothed Coulomb part acts as a large viscous term, "
              "so the fitted damping depends on the amplitude (try --amplitude)."]
    lines += ["", CAUTION, ""]
    md = out / "report.md"
    md.write_text("\n".join(lines), encoding="utf-8")
    return {"csv": csv_path, "png": png, "report": md}


def _motion_text(motion) -> str:
    if isinstance(motion, Multisine):
        return (f"{motion.amplitude_m * 1e3:g} mm peak, lines every {motion.resolution_Hz:g} Hz from "
                f"{motion.band_Hz[0]:g} to {motion.band_Hz[1]:g} Hz")
    return ", ".join(f"{f.name} {getattr(motion, f.name)}" for f in dataclasses.fields(motion))
