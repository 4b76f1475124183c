"""The ``exosandbox`` command: a thin layer over the library API.

Errors a user can cause (a bad option, an unknown subject, an out-of-range
parameter, an unwritable file) print one line and exit with status 2 (usage)
or 1 (anything else); there is no traceback.  A run stopped by Ctrl-C or
SIGTERM exits with status 1, as does a sweep in which every run failed
(after its table).
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Sequence
from pathlib import Path

from models import ExoParams, HumanParams, SandboxError, Subject, exo_urdf, fit_exo, human_urdf, load_exo

__all__ = ["main", "build_parser"]

PROG = "exosandbox"

#: Help of the options that run, compare and sweep share.
_SUBJECT_HELP = "a built-in subject (default: the scenario's): f5, f50, f95, m5, m50, m95"
_DURATION_HELP = "override the scenario's duration [s]"


class _Parser(argparse.ArgumentParser):
    """argparse with a one-line error message, and no abbreviated options: ``sweep --seed 3`` would otherwise
    silently mean ``--seeds 3``, and a repeated ``--controller`` would keep only the last ``--controllers``."""

    def __init__(self, *args, **kwargs) -> None:
        kwargs.setdefault("allow_abbrev", False)
        super().__init__(*args, **kwargs)

    def error(self, message: str) -> None:  # noqa: D401 - argparse API
        self.exit(2, f"{self.prog}: error: {message}\n")


def _version() -> str:
    try:
        from importlib.metadata import version

        return version("exosandbox")
    except Exception:  # not installed (running from a checkout)
        return "unknown"


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of ``exosandbox``."""
    p = _Parser(prog=PROG, description="Simulation sandbox for prioritized interaction "
                "controllers of an upper-limb rehabilitation exoskeleton.")
    p.add_argument("--version", action="version", version=f"{PROG} {_version()}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    u = sub.add_parser("urdf", help="write the URDF of the exoskeleton or of a human arm")
    u.add_argument("what", choices=("exo", "human"), help="which model")
    u.add_argument("-o", "--output", metavar="FILE", help="output file (default: standard output)")
    who = u.add_argument_group("wearer (the human arm, or the person the exoskeleton is fitted to)")
    who.add_argument("--subject", metavar="NAME", help="built-in subject: " + ", ".join(
        ["f5", "f50", "f95", "m5", "m50", "m95"]))
    who.add_argument("--stature", type=float, metavar="M", help="stature [m]")
    who.add_argument("--mass", type=float, metavar="KG", help="body mass [kg]")
    who.add_argument("--sex", choices=("female", "male"))
    u.add_argument("--side", choices=("right", "left"), default="right", help="which arm (default: right)")
    u.add_argument("--girdle", action="store_true", help="human: add the 2-DOF shoulder girdle")
    u.set_defaults(func=_cmd_urdf)

    c = sub.add_parser("check", help="check your own exoskeleton URDF and print what was read")
    c.add_argument("file", metavar="FILE", help="URDF file")
    c.add_argument("--site", action="append", default=[], metavar="NAME=FRAME",
                   help="a cuff site and the frame (link) that carries it; repeat for each cuff")
    c.add_argument("--hand", metavar="FRAME", help="frame of the hand point")
    c.set_defaults(func=_cmd_check)

    r = sub.add_parser("run", help="run a scenario and write a run folder with its log and metrics")
    r.add_argument("scenario", metavar="SCENARIO", help="scenario file, e.g. scenarios/reach.py")
    r.add_argument("--controller", metavar="NAME", help="controller variant (default: the scenario's first)")
    r.add_argument("--seed", type=int, metavar="N", help="random seed (default: the scenario's)")
    r.add_argument("--subject", metavar="NAME", help=_SUBJECT_HELP)
    r.add_argument("--duration", type=float, metavar="S", help=_DURATION_HELP)
    r.add_argument("--out", metavar="DIR", help="run folder (default: runs/SCENARIO-CONTROLLER-seedN, with "
                   "--subject runs/SCENARIO-CONTROLLER-SUBJECT-seedN)")
    r.add_argument("--view", action="store_true", help="watch the run live in the browser (meshcat on 127.0.0.1)")
    r.set_defaults(func=_cmd_run)

    v = sub.add_parser("replay", help="replay a run folder in the browser, or write it as a self-contained HTML file")
    v.add_argument("run_dir", metavar="RUN_DIR", help="a run folder written by 'exosandbox run'")
    v.add_argument("--html", metavar="FILE", help="write a self-contained HTML replay instead of serving it")
    v.add_argument("--fps", type=float, default=30.0, help="frames per second of the replay (default 30)")
    v.set_defaults(func=_cmd_replay)

    b = sub.add_parser("bench", help="measure tick time, solver speed, growth, sweep throughput and memory")
    b.add_argument("--quick", action="store_true", help="the same cases, shorter (under a minute)")
    b.add_argument("--json", metavar="FILE", help="also write the figures to FILE as JSON")
    b.add_argument("--scenario", metavar="FILE",
                   help="the wall-push scenario file (default: the shipped scenarios/wall_push.py)")
    b.add_argument("--profile", type=int, metavar="N", default=0,
                   help="only profile the reference case (cProfile) and print its top N entries")
    b.set_defaults(func=_cmd_bench)

    k = sub.add_parser("compare", help="compare runs side by side: table, Markdown, CSV and plots",
                       description="Compare run folders (exosandbox compare RUN_DIR RUN_DIR ...), or run one "
                       "scenario under several controllers and compare them (exosandbox compare SCENARIO "
                       "--controller a --controller b).")
    k.add_argument("inputs", nargs="+", metavar="RUN_DIR|SCENARIO",
                   help="run folders, or one scenario file (.py) with --controller")
    k.add_argument("--controller", action="append", default=[], metavar="NAME",
                   help="with a scenario: a controller variant to run (repeat; default: all the scenario's)")
    k.add_argument("--seed", type=int, metavar="N", help="with a scenario: random seed (default: the scenario's)")
    k.add_argument("--subject", metavar="NAME", help="with a scenario: " + _SUBJECT_HELP)
    k.add_argument("--duration", type=float, metavar="S", help="with a scenario: " + _DURATION_HELP)
    k.add_argument("--out", metavar="DIR", help="output folder (default: runs/compare, with --subject "
                   "runs/compare-SUBJECT; then -2, -3, ...)")
    k.set_defaults(func=_cmd_compare)

    w = sub.add_parser("sweep", help="run a scenario for every controller x subject x seed, in parallel",
                       description="Run every combination of controller, subject and seed of a scenario, and "
                       "write one results table (CSV and Markdown), plots and a report. Given several scenario "
                       "files, run them all in one sweep: each in a folder of its own (named by the file), and "
                       "the tables and a report across them.")
    w.add_argument("scenario", metavar="SCENARIO", nargs="+",
                   help="scenario file(s), or a folder of them (its *.py files that define SCENARIO or for_subject)")
    w.add_argument("--controllers", metavar="A,B", help="comma-separated controller variants "
                   "(default: all the scenario's; each must be in every scenario given)")
    w.add_argument("--controller", action="append", default=[], metavar="NAME",
                   help="a controller variant; repeat, or add to --controllers")
    w.add_argument("--subjects", metavar="S1,S2",
                   help="comma-separated built-in subjects (default: m50; all: f5,f50,f95,m5,m50,m95)")
    w.add_argument("--subject", action="append", default=[], metavar="NAME",
                   help="a built-in subject; repeat, or add to --subjects")
    w.add_argument("--seeds", type=int, default=1, metavar="N", help="seeds per combination (default 1)")
    w.add_argument("--jobs", type=int, metavar="N",
                   help="runs at a time on this machine: N - 1 worker processes and this one (default: all cores)")
    w.add_argument("--dask", metavar="ADDRESS", help="run on an existing Dask scheduler, e.g. tcp://host:8786")
    w.add_argument("--duration", type=float, metavar="S", help=_DURATION_HELP)
    w.add_argument("--out", metavar="DIR", help="output folder (default: runs/sweep-SCENARIO, or with several "
                   "scenarios runs/sweep-N-scenarios; then -2, -3, ...)")
    w.add_argument("--resume", action="store_true",
                   help="go on with the interrupted sweep in --out DIR, given the same scenarios and options: "
                   "its finished runs are kept, the others run")
    w.add_argument("--run-figures", action="store_true",
                   help="draw each run's figures in its report.md too (about 2 s per run; by default a sweep "
                   "draws only its own)")
    w.add_argument("--vary", action="append", default=[], metavar="FIELD.PATH=V1,V2,...",
                   help="run each value of a scenario field, the others at the scenario's own (repeat for another "
                   "field), e.g. plant.model_mass_scale=0.7,1.0,1.3 or force_sensor.delay_ticks=0,2,5; values are "
                   "Python literals, or for actuators geared,ideal,sea and for impairment none,mild,moderate,severe,"
                   "spastic-mild,...; writes sensitivity.md and plots/sensitivity.png")
    w.add_argument("--population", type=int, metavar="N",
                   help="N wearers sampled (seeded) from ANSUR II stature and body mass per sex instead of "
                   "--subjects; writes population.md: means with 95 %% intervals and paired differences")
    w.set_defaults(func=_cmd_sweep)

    m = sub.add_parser("wallmap", help="map a virtual wall's passivity and stability over stiffness x damping",
                       description="Classify the scenario's plane wall as passive, active or unstable for every "
                       "stiffness x damping of a grid (optionally also over the control period and delay), on a "
                       "one-axis rig or on the full exoskeleton, and write wallmap.csv, wallmap.png (with the "
                       "analytic passivity boundary of Colgate & Schenkel) and report.md.")
    m.add_argument("scenario", metavar="SCENARIO", help="scenario file with a wall_plane, e.g. scenarios/wall_push.py")
    m.add_argument("--setup", choices=("rig", "exo"), default="rig",
                   help="rig: a mass with physical damping and the sampled wall law (fast); exo: the full "
                   "exoskeleton under the walls variant, a short run per cell (default: rig)")
    m.add_argument("--stiffness", metavar="K1,K2", help="comma-separated wall stiffnesses [N/m] (default: the "
                   "scenario wall's times 0.25, 0.5, 1, 2, 4)")
    m.add_argument("--damping", metavar="B1,B2", help="comma-separated wall dampings [N s/m] (default: the "
                   "scenario wall's times 0, 0.5, 1, 2)")
    m.add_argument("--period", metavar="S1,S2", help="comma-separated control periods [s] (default: the scenario's)")
    m.add_argument("--delay", metavar="TICKS1,TICKS2",
                   help="comma-separated control delays [ticks] (default: the scenario's)")
    m.add_argument("--drive", choices=("wearer", "fixture"), default="wearer",
                   help="exo: what pushes the hand into the wall: the scenario's wearer (default) or a hand "
                   "fixture at piecewise-constant velocity through the wall and back (the worst way)")
    m.add_argument("--duration", type=float, metavar="S", help="exo: each cell's run [s] (default: the end of the "
                   "intent's first push-release cycle)")
    m.add_argument("--mass", type=float, metavar="KG", help="rig: moving mass [kg] (default: the exoskeleton's "
                   "operational-space mass along the wall normal at the start posture)")
    m.add_argument("--physical-damping", type=float, metavar="N_S_PER_M", help="rig: physical damping [N s/m] "
                   "(default: the exoskeleton's joint viscous friction seen along the wall normal)")
    m.add_argument("--subject", metavar="NAME", help=_SUBJECT_HELP)
    m.add_argument("--jobs", type=int, default=1, metavar="N", help="cells at a time on this machine (default 1)")
    m.add_argument("--dask", metavar="ADDRESS", help="run on an existing Dask scheduler, e.g. tcp://host:8786")
    m.add_argument("--out", metavar="DIR", help="output folder (default: runs/wallmap-SCENARIO-SETUP; then -2, ...)")
    m.set_defaults(func=_cmd_wallmap)

    a = sub.add_parser("misalignment", help="steady cuff forces of a joint-centre offset over shoulder postures",
                       description="Move the relaxed wearer passively over a grid of gh flexion x gh abduction with "
                       "the robot transparent, with and without an offset of the wearer's joint centres, and write "
                       "misalignment.csv, misalignment.png (the parasitic force per cuff) and report.md.")
    a.add_argument("scenario", metavar="SCENARIO", help="scenario file, e.g. scenarios/reach.py (its start posture "
                   "is where the cuffs are closed)")
    a.add_argument("--offset", default="0,0,0.02", metavar="X,Y,Z", help="the wearer's joint centres relative to "
                   "the robot's, robot base frame (x forward, y left, z up) [m] (default: 0,0,0.02)")
    a.add_argument("--girdle", action=argparse.BooleanOptionalAction, default=None,
                   help="the wearer's shoulder girdle on or off (default: the scenario's subject)")
    a.add_argument("--controller", default="transparent", metavar="NAME",
                   help="the robot's controller during each cell, or 'held' (the robot held rigidly, static; "
                   "default: transparent)")
    a.add_argument("--flexion", default="0,90,30", metavar="LO,HI,STEP", help="gh flexion grid [deg] "
                   "(default: 0,90,30)")
    a.add_argument("--abduction", default="0,60,30", metavar="LO,HI,STEP", help="gh abduction grid [deg] "
                   "(default: 0,60,30)")
    a.add_argument("--subject", metavar="NAME", help=_SUBJECT_HELP)
    a.add_argument("--jobs", type=int, default=1, metavar="N", help="cells at a time on this machine (default 1)")
    a.add_argument("--dask", metavar="ADDRESS", help="run on an existing Dask scheduler, e.g. tcp://host:8786")
    a.add_argument("--out", metavar="DIR", help="output folder (default: runs/misalignment-SCENARIO; then -2, ...)")
    a.set_defaults(func=_cmd_misalignment)

    g = sub.add_parser("catalog", help="list the scenarios of a folder, the controller variants, the tasks, the "
                       "subjects and the frame names of the models",
                       description="List what a scenario file and the other commands can name: the scenarios of "
                       "a folder (a file that fails to load shows as one line with its error), the controller "
                       "variants with their levels of tasks, the registered tasks with their parameters, the "
                       "built-in subjects, and the frame, cuff site and link names of the exoskeleton and of the "
                       "median man's (m50) arm.")
    g.add_argument("--scenarios", metavar="DIR", help="folder of scenario files (default: the scenarios shipped "
                   "with exosandbox, installed beside the package)")
    g.add_argument("--json", action="store_true", help="print the same as one JSON object, for scripts")
    g.set_defaults(func=_cmd_catalog)

    z = sub.add_parser("impedance", help="measure the impedance felt at the robot's hand under each controller",
                       description="Run the robot alone with a test fixture in the wearer's place at its hand "
                       "cuff, imposing a small multisine motion along a direction from the scenario's start "
                       "posture; estimate the impedance Z = F/V (H1, Welch) with its coherence, fit "
                       "m s + b + k/s and find the transparency bandwidth, for each controller variant. Writes "
                       "impedance.csv, bode.png and report.md.")
    z.add_argument("scenario", metavar="SCENARIO", help="scenario file (.py)")
    z.add_argument("--controller", action="append", default=[], metavar="NAME",
                   help="a controller variant; repeat, or add to --controllers")
    z.add_argument("--controllers", metavar="A,B", help="comma-separated controller variants "
                   "(default: all the scenario's)")
    z.add_argument("--direction", metavar="X,Y,Z", default="1,0,0",
                   help="direction of the imposed motion in the world frame (normalised; default 1,0,0)")
    z.add_argument("--amplitude", type=float, metavar="M", default=0.005,
                   help="peak displacement of the imposed motion [m] (default 0.005)")
    z.add_argument("--band", metavar="LO,HI", default="0.5,20",
                   help="excited band [Hz] (default 0.5,20; lines every 0.25 Hz)")
    z.add_argument("--duration", type=float, metavar="S",
                   help="simulated time per variant [s] (default 20: one 4 s period to settle, then 4 periods "
                   "analysed)")
    z.add_argument("--threshold", type=float, metavar="N_S_PER_M",
                   help="transparency threshold on |Z| [N s/m] (default 12.5: a 1 kg mass at 2 Hz)")
    z.add_argument("--posture", metavar="DEG,DEG,...",
                   help="the robot's start posture, one angle per robot joint [deg] (default: the scenario's)")
    z.add_argument("--lateral", choices=("held", "free"), default="held",
                   help="the fixture holds the hand sideways of the motion (a linear stage; default) or leaves "
                   "it free")
    z.add_argument("--through-wearer", action="store_true",
                   help="the fixture moves the wearer's hand, the wearer strapped in as usual and holding still "
                   "at the start posture (default: the robot alone, the fixture at its hand cuff)")
    z.add_argument("--seed", type=int, metavar="N", help="random seed (default: the scenario's)")
    z.add_argument("--out", metavar="DIR", help="output folder (default: runs/impedance-SCENARIO; then -2, -3, ...)")
    z.set_defaults(func=_cmd_impedance)

    cv = sub.add_parser("coverage", help="map the shoulder postures and axial rotations the exoskeleton can "
                        "follow, against the ranges needed for daily living",
                        description="Over a grid of ISB shoulder angles (plane of elevation x elevation), find "
                        "the axial rotations of the humerus the robot follows within its joint limits, its "
                        "manipulability and distance to a shoulder singularity, and the share of the "
                        "daily-living region covered. Writes coverage.csv, coverage.png, ranges.png and "
                        "report.md.")
    cv.add_argument("--subject", default="m50", metavar="NAME",
                    help="a built-in subject: f5, f50, f95, m5, m50, m95 (default m50)")
    cv.add_argument("--girdle", action="store_true", help="give the wearer the 2-DOF shoulder girdle")
    cv.add_argument("--misalignment", metavar="X,Y,Z", default="0,0,0",
                    help="offset of the wearer's shoulder centre from the robot's, base frame [m] (default 0,0,0)")
    cv.add_argument("--exo", metavar="URDF", help="your own exoskeleton URDF (default: the built-in one, fitted)")
    cv.add_argument("--site", action="append", default=[], metavar="NAME=FRAME",
                    help="with --exo: a cuff site and the frame that carries it; repeat for each cuff")
    cv.add_argument("--hand", metavar="FRAME", help="with --exo: frame of the hand point")
    cv.add_argument("--plane-step", type=float, default=15.0, metavar="DEG",
                    help="grid step of the plane of elevation [deg] (default 15)")
    cv.add_argument("--elevation-step", type=float, default=15.0, metavar="DEG",
                    help="grid step of the elevation [deg] (default 15)")
    cv.add_argument("--axial-step", type=float, default=10.0, metavar="DEG",
                    help="sampling step of the axial rotation [deg] (default 10)")
    cv.add_argument("--out", metavar="DIR", help="output folder (default: runs/coverage-SUBJECT; then -2, -3, ...)")
    cv.set_defaults(func=_cmd_coverage)
    return p


def _wearer(args: argparse.Namespace, parser: argparse.ArgumentParser) -> Subject | None:
    explicit = [args.stature, args.mass, args.sex]
    if args.subject is not None:
        if any(x is not None for x in explicit):
            parser.error("give either --subject or --stature/--mass/--sex, not both")
        return Subject.named(args.subject)
    if all(x is None for x in explicit):
        return None
    if any(x is None for x in explicit):
        parser.error("--stature, --mass and --sex go together")
    return Subject(args.stature, args.mass, args.sex)


def _check_duration(args: argparse.Namespace, parser: argparse.ArgumentParser) -> None:
    """``--duration``, when given, is a finite number of seconds > 0 (a usage error otherwise)."""
    d = args.duration
    if d is not None and not d > 0:
        parser.error(f"--duration must be > 0, got {d}")
    if d is not None and d == float("inf"):
        parser.error(f"--duration must be a finite number of seconds, got {d}")
    from sim.loop.scenario import MAX_DURATION_S

    if d is not None and d > MAX_DURATION_S:  # before a sweep starts runs that would each be refused
        parser.error(f"--duration must be at most {MAX_DURATION_S:g} s (1 h of simulated time), got {d}")


def _scenario_for(path: str | Path, args: argparse.Namespace):
    """The scenario file with ``--subject`` (through the file's ``for_subject``, as ``sweep`` applies it) and
    ``--duration``; an unknown subject is refused first, with the list of the built-in ones."""
    import dataclasses

    from sim.loop.scenario import load_scenario

    if args.subject is not None:
        Subject.named(args.subject)  # one line naming the subject and the built-in ones
    scenario = load_scenario(path, subject=args.subject)
    if args.duration is not None:
        scenario = dataclasses.replace(scenario, duration_s=args.duration)
    return scenario


def _cmd_urdf(args: argparse.Namespace, parser: argparse.ArgumentParser) -> str:
    subject = _wearer(args, parser)
    if args.what == "exo":
        if args.girdle:
            parser.error("--girdle applies to 'urdf human' only")
        params = ExoParams(side=args.side) if subject is None else fit_exo(HumanParams(subject, side=args.side))
        text = exo_urdf(params)
        summary = f"{params.side}-arm exoskeleton, 7 joints, {params.total_mass_kg:.2f} kg moving mass"
    else:
        hp = HumanParams(subject or "m50", girdle=args.girdle, side=args.side)
        s = hp.subject
        text = human_urdf(hp)
        summary = (f"human {hp.side} arm, {len(hp.joint_names)} joints, {s.sex} {s.stature_m:.3f} m "
                   f"{s.mass_kg:.1f} kg")
    if args.output is None:
        sys.stdout.write(text)
        return ""
    out = Path(args.output)
    try:
        out.write_text(text, encoding="utf-8")
    except OSError as e:
        raise _UserError(f"cannot write {str(out)!r}: {e.strerror or e}") from e
    return f"wrote {out} ({summary})"


def _cmd_check(args: argparse.Namespace, parser: argparse.ArgumentParser) -> str:
    sites = {}
    for item in args.site:
        name, sep, frame = item.partition("=")
        if not sep or not name or not frame:
            parser.error(f"--site expects NAME=FRAME, got {item!r}")
        sites[name] = frame
    arm = load_exo(Path(args.file), sites=sites, hand_frame=args.hand or "")
    m = arm.model
    mass = sum(m.inertias[i].mass for i in range(1, m.njoints))
    bodies = sum(1 for f in m.frames if f.type.name == "BODY" and f.parentJoint > 0)
    lines = [f"{args.file}: ok, {arm.nq} revolute joints, {mass:.3f} kg moving mass "
             f"(mass, centre of mass and inertia of the {bodies} moving links as built match the file)"]
    lines.append(f"  {'joint':<24} {'lower rad':>10} {'upper rad':>10} {'effort N m':>11} {'vel rad/s':>10}")
    for i, name in enumerate(arm.joint_names):
        lines.append(f"  {name:<24} {m.lowerPositionLimit[i]:>10.4f} {m.upperPositionLimit[i]:>10.4f} "
                     f"{m.effortLimit[i]:>11.3f} {m.velocityLimit[i]:>10.3f}")
    for name, frame in sites.items():
        lines.append(f"  cuff site {name!r} -> frame {frame!r}")
    if args.hand:
        lines.append(f"  hand point -> frame {args.hand!r}")
    return "\n".join(lines)


def _cmd_run(args: argparse.Namespace, parser: argparse.ArgumentParser) -> str:
    from sim.experiments.run import run_scenario
    from sim.loop.simulation import SimulationError

    _check_duration(args, parser)
    scenario = _scenario_for(args.scenario, args)
    controller = args.controller or scenario.controllers[0]
    if controller not in scenario.controllers:
        raise _UserError(f"scenario {scenario.name!r} supports the controllers {', '.join(scenario.controllers)}; "
                         f"got {controller!r}")
    if args.seed is not None and args.seed < 0:
        parser.error(f"--seed must be >= 0, got {args.seed}")
    seed = scenario.seed if args.seed is None else args.seed
    if args.out:
        out = Path(args.out)
        if out.is_dir() and any(out.iterdir()):
            raise _UserError(f"run folder {str(out)!r} already holds something; choose another --out")
    else:
        who = f"-{args.subject}" if args.subject is not None else ""
        out = _fresh_folder(Path("runs") / f"{scenario.name}-{controller}{who}-seed{seed}")
    _writable_folder(out, "--out" if args.out else "run folder")
    bar = _progress_bar(f"{scenario.name}/{controller}")
    viewer = _LazyViewer(out) if args.view else None
    try:
        result = run_scenario(scenario, controller, out, seed=seed, progress=bar.update if bar else None,
                              observer=viewer)
    except KeyboardInterrupt:
        raise _UserError(f"interrupted; the finished part of the log is kept in {out}, with the metrics of that "
                         "part (marked partial)") from None
    except SimulationError as e:
        raise _UserError(f"{e}; the log up to that tick is kept in {out}") from e
    finally:
        if bar:
            bar.close()
        if viewer is not None:
            viewer.close()
    m = result.metrics
    # with a wall: the transparency outside it (inside, the force is the wall) and the stiffness it was rendered with
    wall = "".join(f", {k} = {m[k]:{spec}}" for k, spec in (("interaction_force_free_rms_N", ".2f"),
                                                             ("wall_stiffness_rendered_N_per_m", ".1f"))
                   if m.get("wall_penetration_max_m") is not None and m.get(k) is not None)
    from sim.experiments.run import run_warnings

    warnings = "".join(f"\nwarning: {w}" for w in run_warnings(m))  # after the results; the exit code stays 0
    return (f"results in {out}: interaction_force_rms_N = {m['interaction_force_rms_N']:.2f}, "
            f"human_effort_ratio = {m['human_effort_ratio']:.3f}, realtime_factor = {m['realtime_factor']:.2f}{wall} "
            f"(all metrics in {out / 'metrics.json'}, report with plots in {out / 'report.md'}){warnings}")


class _LazyViewer:
    """Opens the live viewer on the first tick, once the run folder holds its models."""

    def __init__(self, folder: Path) -> None:
        self.folder, self.viewer = folder, None

    def __call__(self, t_s, q_exo, q_human, forces_world) -> None:
        if self.viewer is None:
            from sim.output.viz import LiveViewer

            self.viewer = LiveViewer(self.folder, max_fps=30, background=True)
            print(f"live view at {self.viewer.url}", file=sys.stderr, flush=True)
        self.viewer.update(t_s, q_exo, q_human, forces_world)

    def close(self) -> None:
        if self.viewer is not None:
            self.viewer.close()


def _cmd_replay(args: argparse.Namespace, parser: argparse.ArgumentParser) -> str:
    from sim.loop.interrupt import stop_on_signals
    from sim.loop.runlog import load_run
    from sim.output import viz

    if not 0 < args.fps <= MAX_REPLAY_FPS:  # also refuses nan and inf
        parser.error(f"--fps must be a number of frames per second in (0, {MAX_REPLAY_FPS:g}], got {args.fps}")
    run_dir = Path(args.run_dir)
    load_run(run_dir)  # a clear error for a missing or broken run folder
    if args.html:
        path = viz.write_replay_html(run_dir, Path(args.html), fps=args.fps)
        return f"wrote {path} (open it in any browser; it needs no connection)"
    with stop_on_signals():  # SIGTERM stops the replay like Ctrl-C: its server with it
        vis, url = viz.replay(run_dir, fps=args.fps)
        try:
            print(f"replay at {url} (Ctrl-C to stop)", flush=True)
            while True:
                time.sleep(1.0)
        except KeyboardInterrupt:
            return "stopped"
        finally:
            viz.close_visualizer(vis)


def _cmd_bench(args: argparse.Namespace, parser: argparse.ArgumentParser) -> str:
    import json

    from sim.experiments.bench import BenchParams, format_report, profile_reference, run_bench

    if args.scenario is None:  # the shipped file, installed beside this package (not imported: sim never imports it)
        args.scenario = str(Path(__file__).resolve().parents[1] / "scenarios" / "wall_push.py")
    if not Path(args.scenario).is_file():
        raise _UserError(f"scenario file {args.scenario!r} does not exist")
    if args.profile < 0:
        parser.error(f"--profile must be >= 0, got {args.profile}")
    params = BenchParams.quick() if args.quick else BenchParams()
    if args.json:
        _writable_file(Path(args.json), "--json")  # before the long bench, not after
    if args.profile:
        return profile_reference(args.scenario, min(params.reference_duration_s, 3.0), top=args.profile)
    report = run_bench(args.scenario, params, progress=lambda msg: print(msg, file=sys.stderr, flush=True))
    text = format_report(report)
    if args.json:
        try:
            Path(args.json).write_text(json.dumps(report, indent=2) + "\n", encoding="utf-8")
        except OSError as e:
            print(text, flush=True)  # the figures took minutes: never lose them
            raise _UserError(f"cannot write {args.json!r}: {e.strerror or e}; the figures are printed above") from e
    return text


def _writable_folder(out: Path, option: str = "--out") -> None:
    """One line, before anything runs, unless ``out`` is (or can become) a folder this process can write in.

    Creates the missing folders, writes and removes a probe file, and removes the folders it created: a run
    refused later leaves nothing behind.
    """
    if out.exists() and not out.is_dir():
        raise _UserError(f"{option} {str(out)!r} is a file; expected a folder (new or empty)")
    missing = []
    for folder in (out, *out.parents):
        if folder.exists():
            if not folder.is_dir():
                raise _UserError(f"{option} {str(out)!r}: {str(folder)!r} is a file, not a folder")
            break
        missing.append(folder)
    probe = out / ".write-probe"
    try:
        out.mkdir(parents=True, exist_ok=True)
        probe.write_bytes(b"")
        probe.unlink()
    except OSError as e:
        raise _UserError(f"{option} {str(out)!r} is not writable: {e.strerror or e}") from e
    finally:
        for folder in missing:  # deepest first
            try:
                folder.rmdir()
            except OSError:
                break


def _writable_file(path: Path, option: str) -> None:
    """One line, before anything runs, unless ``path`` is a file this process can create or replace."""
    if path.is_dir():
        raise _UserError(f"{option} {str(path)!r} is a folder; expected a file name")
    parent = path.parent
    if not parent.is_dir():
        raise _UserError(f"{option} {str(path)!r}: the folder {str(parent)!r} does not exist")
    existed = path.exists()
    try:
        with path.open("a", encoding="utf-8"):
            pass
    except OSError as e:
        raise _UserError(f"{option} {str(path)!r} is not writable: {e.strerror or e}") from e
    if not existed:
        path.unlink()


#: Highest replay frame rate [frames/s]: a browser draws at most a few hundred (a project bound).
MAX_REPLAY_FPS = 1000.0


def _fresh_folder(base: Path) -> Path:
    """``base``, or ``base-2``, ``base-3``, ... the first that does not exist yet."""
    out, k = base, 1
    while out.exists():
        k += 1
        out = base.with_name(f"{base.name}-{k}")
    return out


def _output_folder(out_option: str | None, default: Path) -> Path:
    """The folder a command writes into: ``--out`` if given (refused when it already holds something), else
    :func:`_fresh_folder` of ``default``."""
    if out_option:
        out = Path(out_option)
        if out.is_dir() and any(out.iterdir()):
            raise _UserError(f"output folder {str(out)!r} already holds something; choose another --out")
        return out
    return _fresh_folder(default)


def _cmd_compare(args: argparse.Namespace, parser: argparse.ArgumentParser) -> str:
    from sim.loop.runlog import load_run
    from sim.output.report import compare_runs, fmt, text_table

    first = Path(args.inputs[0])
    scenario_mode = first.suffix == ".py"
    if not scenario_mode and (args.controller or args.seed is not None or args.subject is not None
                              or args.duration is not None):
        parser.error("--controller, --seed, --subject and --duration go with a scenario file, not with run folders")
    _check_duration(args, parser)
    out = _output_folder(args.out, Path("runs") / ("compare" if args.subject is None else f"compare-{args.subject}"))
    if scenario_mode:
        from sim.experiments.run import Batch, run_scenario
        from sim.loop.simulation import SimulationError

        if len(args.inputs) > 1:
            parser.error("give one scenario file, or run folders only")
        if args.seed is not None and args.seed < 0:
            parser.error(f"--seed must be >= 0, got {args.seed}")
        scenario = _scenario_for(first, args)
        controllers = list(dict.fromkeys(args.controller)) or list(scenario.controllers)
        for c in controllers:
            if c not in scenario.controllers:
                raise _UserError(f"scenario {scenario.name!r} supports the controllers "
                                 f"{', '.join(scenario.controllers)}; got {c!r}")
        _writable_folder(out, "--out" if args.out else "output folder")
        run_dirs = []
        batch = Batch()  # the runs of this comparison: one baseline, one warm-up per controller
        for c in controllers:
            bar = _progress_bar(f"{scenario.name}/{c}")
            # the human-alone baseline is the same for every controller: simulated once, then copied
            baseline = run_dirs[0] / "human_alone" if run_dirs else None
            try:
                run_scenario(scenario, c, out / c, seed=args.seed, progress=bar.update if bar else None,
                             baseline_from=baseline, batch=batch)
            except SimulationError as e:
                raise _UserError(f"{e}; the runs so far are kept in {out}") from e
            finally:
                if bar:
                    bar.close()
            run_dirs.append(out / c)
    else:
        if len(args.inputs) < 2:
            parser.error("give at least two run folders to compare (or one scenario file)")
        run_dirs = [Path(d) for d in args.inputs]
        for d in run_dirs:
            load_run(d)  # a clear error for a missing or broken folder, before anything is written
        _writable_folder(out, "--out" if args.out else "output folder")
    rows, labels, md = compare_runs(run_dirs, out)
    table = text_table(["metric", "unit", *labels], [[r["key"], r["unit"]] + [
        fmt(r[lab]) + (" *" if r["best"] == lab else "") for lab in labels] for r in rows])
    from sim.experiments.run import run_warnings

    warnings = "".join(f"\nwarning: {lab}: {w}" for lab, d in zip(labels, run_dirs)
                       for w in run_warnings(load_run(d).metrics or {}))
    return (f"{table}\n(* the better value)\nreport {md}, table {out / 'compare.csv'}, plots in {out / 'plots'}"
            f"{warnings}")


def _cmd_catalog(args: argparse.Namespace, parser: argparse.ArgumentParser) -> str:
    import json

    from sim.catalog import catalog

    c = catalog(args.scenarios)
    if args.json:
        return json.dumps(c.as_dict(), indent=2)

    def levels(lv) -> str:
        return " > ".join("[" + ", ".join(level) + "]" for level in lv)

    lines = [f"scenarios in {c.scenarios_folder} (exosandbox run FILE):"]
    width = max((len(e.file) for e in c.scenarios), default=0)
    for e in c.scenarios:
        if e.error is not None:
            lines.append(f"  {e.file:<{width}}  error: {e.error}")
            continue
        lines.append(f"  {e.file:<{width}}  {e.name}, {e.duration_s:g} s, controllers {', '.join(e.controllers)}")
        if e.description:
            lines.append(f"  {'':<{width}}  {e.description}")
        lines += [f"  {'':<{width}}  own variant {v}: {levels(lv)}" for v, lv in e.own_variants.items()]
    if not c.scenarios:
        lines.append("  (no *.py file)")
    lines += ["", "controller variants (--controller NAME; levels highest priority first):"]
    width = max(len(v.name) for v in c.variants)
    lines += [f"  {v.name:<{width}}  {levels(v.levels) if v.levels else v.summary}" for v in c.variants]
    if c.path_variants:
        lines += ["", "controller variants for a scenario with a reference_path (the path's task at the second level):"]
        width = max(len(v.name) for v in c.path_variants)
        lines += [f"  {v.name:<{width}}  {levels(v.levels)}" for v in c.path_variants]
    lines += ["", "tasks (in a scenario's variants: \"name\", (\"name\", {parameter: value}) or a Task object):"]
    for t in c.tasks:
        params, star = [], False
        for p in t.parameters:
            if p.keyword_only and not star:
                params.append("*")
                star = True
            params.append(p.name if p.default is None else f"{p.name}={p.default}")
        lines += [f"  {t.name}({', '.join(params)})", f"      {t.summary} [{t.cls}]"]
    lines += ["", "subjects (--subject NAME):"]
    lines += [f"  {s.name:<4} {s.sex:<6}  {s.stature_m:.3f} m  {s.mass_kg:5.1f} kg" for s in c.subjects]
    lines += ["", "frames (a task's frame= names one of the exoskeleton's; the human arm's for reference):"]
    for f in c.frames:
        lines += [f"  {f.model}: hand point {f.hand_frame}",
                  "    cuff sites: " + ", ".join(f"{site} -> {frame}" for site, frame in f.sites.items()),
                  "    links: " + ", ".join(f.links)]
    lines += ["", "cuffs (a wall task's sensor=): " + ", ".join(
        f"{k.name} (exo site {k.exo_site}, human site {k.human_site})" for k in c.cuffs)]
    return "\n".join(lines)


def _number_list(text: str | None, option: str, parser: argparse.ArgumentParser, *, integer: bool = False,
                 positive: bool = True) -> list | None:
    """A comma-separated ``option`` as numbers (None if not given); a bad one is a usage error naming it."""
    if text is None:
        return None
    import math

    out = []
    for item in text.split(","):
        item = item.strip()
        try:
            v = int(item) if integer else float(item)
        except ValueError:
            parser.error(f"{option} expects comma-separated {'integers' if integer else 'numbers'}, got {item!r}")
        if not math.isfinite(v) or (v <= 0 if positive else v < 0):
            parser.error(f"{option} values must be finite and {'> 0' if positive else '>= 0'}, got {item!r}")
        out.append(v)
    if len(set(out)) != len(out):
        parser.error(f"{option} holds a value twice: {text!r}")
    return out


def _cmd_wallmap(args: argparse.Namespace, parser: argparse.ArgumentParser) -> str:
    import dataclasses

    from sim.experiments.wallmap import largest_passive, rig_params_for, scenario_wall_law, wall_map, write_wall_map
    from sim.loop.scenario import load_scenario
    from sim.output.report import fmt

    stiffness = _number_list(args.stiffness, "--stiffness", parser)
    damping = _number_list(args.damping, "--damping", parser, positive=False)
    periods = _number_list(args.period, "--period", parser)
    delays = _number_list(args.delay, "--delay", parser, integer=True, positive=False)
    if args.jobs < 1:
        parser.error(f"--jobs must be >= 1, got {args.jobs}")
    for option, value in (("--mass", args.mass), ("--duration", args.duration)):
        if value is not None and not (0 < value < float("inf")):
            parser.error(f"{option} must be a finite number > 0, got {value}")
    if args.physical_damping is not None and not (0 <= args.physical_damping < float("inf")):
        parser.error(f"--physical-damping must be a finite number >= 0, got {args.physical_damping}")
    if args.setup == "rig" and (args.duration is not None):
        parser.error("--duration applies to --setup exo only")
    if args.drive == "fixture" and args.duration is not None:
        parser.error("--duration applies to --drive wearer only (the fixture's runs last their push-release cycles)")
    if args.subject is not None:
        Subject.named(args.subject)
    scenario = load_scenario(args.scenario, subject=args.subject)
    law = scenario_wall_law(scenario)
    K0, B0 = law.stiffness_N_per_m, law.damping_N_s_per_m
    stiffness = stiffness or [K0 * f for f in (0.25, 0.5, 1.0, 2.0, 4.0)]
    damping = damping or list(dict.fromkeys(B0 * f for f in (0.0, 0.5, 1.0, 2.0)))
    rig = rig_params_for(scenario)
    rig = dataclasses.replace(rig, **{k: v for k, v in (("mass_kg", args.mass),
                                                        ("damping_N_s_per_m", args.physical_damping))
                                      if v is not None})
    out = _output_folder(args.out, Path("runs") / f"wallmap-{scenario.name}-{args.setup}")
    _writable_folder(out, "--out" if args.out else "output folder")
    try:
        result = wall_map(scenario, stiffness, damping, setup=args.setup, periods_s=periods,
                          control_delays_ticks=delays, rig=rig, drive=args.drive, duration_s=args.duration,
                          jobs=args.jobs, dask_address=args.dask, work_dir=out / "cells")
    except KeyboardInterrupt:
        raise _UserError("interrupted; no map written") from None
    paths = write_wall_map(result, out)
    lines = [f"{len(result.cells)} cells on the {args.setup} in {result.elapsed_s:.1f} s; largest passive "
             "stiffness of the grid per damping (and the analytic bound for the rig's b = "
             f"{fmt(rig.damping_N_s_per_m)} N s/m):"]
    from sim.analysis.passivity import max_passive_stiffness_N_per_m

    for (T, d, B), K in largest_passive(result.cells).items():
        total = rig.sensor_delay_ticks + d
        bound = max_passive_stiffness_N_per_m(rig.damping_N_s_per_m, T, B, total)
        lines.append(f"  T = {1e3 * T:g} ms, delay {total}, B = {fmt(B)} N s/m: "
                     f"{'none' if K is None else fmt(K) + ' N/m'} (bound {fmt(bound)} N/m)")
    own = [c for c in result.cells if c.stiffness_N_per_m == K0 and c.damping_N_s_per_m == B0]
    lines += [f"the scenario's wall ({fmt(K0)} N/m, {fmt(B0)} N s/m): {c.cls}"
              + (f" at T = {1e3 * c.period_s:g} ms, delay {c.delay_ticks}" if len(own) > 1 else "") for c in own]
    lines.append(f"map {paths['png']}, cells {paths['csv']}, report {paths['report']}")
    return "\n".join(lines)


def _cmd_misalignment(args: argparse.Namespace, parser: argparse.ArgumentParser) -> str:
    import math

    from sim.experiments.misalignment import misalignment_map, worst_cells, write_misalignment
    from sim.loop.scenario import load_scenario
    from sim.output.report import fmt

    offset = _floats(args.offset, 3, "--offset", "three comma-separated numbers X,Y,Z [m]")
    axes = {}
    for option, text in (("--flexion", args.flexion), ("--abduction", args.abduction)):
        lo, hi, step = _floats(text, 3, option, "three comma-separated angles LO,HI,STEP [deg]")
        if not (step > 0 and lo <= hi and -180 <= lo and hi <= 180):
            parser.error(f"{option} must be LO <= HI within [-180, 180] deg and STEP > 0, got {text!r}")
        n = int(math.floor((hi - lo) / step + 1e-9)) + 1
        if n > 100:
            parser.error(f"{option} gives {n} angles; at most 100, got {text!r}")
        axes[option] = [math.radians(lo + i * step) for i in range(n)]
    if args.jobs < 1:
        parser.error(f"--jobs must be >= 1, got {args.jobs}")
    if args.subject is not None:
        Subject.named(args.subject)
    scenario = load_scenario(args.scenario, subject=args.subject)
    if args.controller != "held" and args.controller not in scenario.controllers:
        raise _UserError(f"--controller: scenario {scenario.name!r} supports the controllers "
                         f"{', '.join(scenario.controllers)} (or 'held'); got {args.controller!r}")
    out = _output_folder(args.out, Path("runs") / f"misalignment-{scenario.name}")
    _writable_folder(out, "--out" if args.out else "output folder")
    try:
        result = misalignment_map(scenario, offset, axes["--flexion"], axes["--abduction"], girdle=args.girdle,
                                  controller=args.controller, jobs=args.jobs, dask_address=args.dask)
    except KeyboardInterrupt:
        raise _UserError("interrupted; no map written") from None
    paths = write_misalignment(result, out)
    unsteady = len({(c.flexion_rad, c.abduction_rad) for c in result.cells if not c.steady})
    lines = [f"{len(result.cells)} cells in {result.elapsed_s:.1f} s ({result.executor}); {unsteady} posture(s) did "
             "not settle or could not be reached (left out); worst steady parasitic force per cuff:"]
    for name, c in worst_cells(result).items():
        lines.append(f"  {name}: {fmt(c.parasitic_force_N)} N, {fmt(c.parasitic_torque_Nm)} N m at flexion "
                     f"{math.degrees(c.flexion_rad):g} deg, abduction {math.degrees(c.abduction_rad):g} deg "
                     f"(force {fmt(c.force_N)} N with the offset, {fmt(c.force0_N)} N without)")
    lines.append(f"map {paths['png']}, cells {paths['csv']}, report {paths['report']}")
    return "\n".join(lines)


#: Columns of the sweep table printed on the terminal (summary.md and summary.csv hold every summary metric).
_SWEEP_COLUMNS = ("interaction_force_rms_N", "interaction_force_free_rms_N", "apparent_mass_hand_kg",
                  "human_effort_ratio", "wall_stiffness_rendered_N_per_m", "hqp_fallback_count")


def _cmd_sweep(args: argparse.Namespace, parser: argparse.ArgumentParser) -> str | tuple[str, int]:
    from sim.experiments.sweep import run_sweep, scenario_files, scenario_folders
    from sim.loop.scenario import load_scenario
    from sim.output.report import fmt_stat, has_wall, sweep_verdicts, text_table

    controllers = [c.strip() for c in (args.controllers or "").split(",") + args.controller if c.strip()] or None
    subjects = [s.strip() for s in (args.subjects or "").split(",") + args.subject if s.strip()] or ["m50"]
    if args.seeds < 1:
        parser.error(f"--seeds must be >= 1, got {args.seeds}")
    if args.jobs is not None and args.jobs < 1:
        parser.error(f"--jobs must be >= 1, got {args.jobs}")
    _check_duration(args, parser)
    if args.resume and not args.out:
        parser.error("--resume needs the folder of the sweep to resume: --out DIR")
    if args.population is not None and (args.subjects or args.subject):
        parser.error("--population samples the wearers: give it without --subjects/--subject")
    if args.population is not None and args.population < 2:
        parser.error(f"--population must be >= 2, got {args.population}")
    from sim.experiments.vary import parse_vary

    vary = [parse_vary(v) for v in args.vary]
    files = scenario_files(args.scenario)
    n_scenarios = len(scenario_folders(files))
    several = n_scenarios > 1
    if args.out:
        out = Path(args.out)
        _writable_folder(out)
    elif several:
        out = _fresh_folder(Path("runs") / f"sweep-{n_scenarios}-scenarios")
    else:
        out = _fresh_folder(Path("runs") / f"sweep-{load_scenario(files[0]).name}")
    try:
        result = run_sweep(args.scenario, controllers, subjects, args.seeds, out_dir=out, jobs=args.jobs,
                           dask_address=args.dask, progress=True, duration_s=args.duration, resume=args.resume,
                           run_figures=args.run_figures, vary=vary, population=args.population)
    except KeyboardInterrupt:
        raise _UserError(f"interrupted; the runs finished so far are in {out / 'runs.csv'}; the same command with "
                         f"--out {out} --resume goes on with the others") from None
    parts = ({name: [r for r in result.summary if r["scenario"] == name]
              for name in dict.fromkeys(r["scenario"] for r in result.summary)} if several
             else {"": list(result.summary)})
    walled = {name: has_wall(rows) for name, rows in parts.items()}
    keys = [k for k in _SWEEP_COLUMNS if any(r.get(f"{k}_mean") is not None for r in result.summary)
            and (any(walled.values()) or k != "interaction_force_free_rms_N")]  # without a wall it is the RMS again

    def cell(r: dict, k: str) -> str:
        if r.get(f"{k}_mean") is None or (k == "interaction_force_free_rms_N" and not walled[r.get("scenario", "")]):
            return "n/a"
        return fmt_stat(r[f"{k}_mean"], r[f"{k}_std"])

    first = ["scenario"] if several else []
    shown = [r for r in result.summary if r["subject"] == "all"] if several else result.summary
    table = text_table([*first, "controller", "subject", "ok", *keys], [
        [*([r["scenario"]] if several else []), r["controller"], r["subject"],
         f"{r['n_ok']}/{r['n_ok'] + r['n_failed']}"] + [cell(r, k) for k in keys] for r in shown])
    lines = [table, ("(mean ± standard deviation over every subject and seed; per subject, and every metric, in "
                     if several else "(mean ± standard deviation over seeds; 'all' pools every subject; the full "
                     "table is in ") + f"{out / 'summary.md'})", ""]
    for name, rows in parts.items():
        for question, verdict in sweep_verdicts(rows).items():
            lines += [f"{name + ': ' if name else ''}{question}:", *(f"  {v}" for v in verdict)]
    if result.failed:
        lines.append(f"{len(result.failed)} of {len(result.results)} runs failed:")
        lines += [f"  {r.case.label}: {r.error}" for r in result.failed]
    if vary:
        lines.append(f"sensitivity {out / 'sensitivity.md'}, chart {out / 'plots' / 'sensitivity.png'}")
    if vary or args.population is not None:
        from sim.experiments.vary import population_rows

        shown_keys = [k for k in _SWEEP_COLUMNS if any(walled.values()) or k != "interaction_force_free_rms_N"]
        _, diffs = population_rows(result.results, shown_keys)
        if diffs:
            lines.append("Paired differences (same wearer and seed), mean [95 % interval]:")
            lines += [f"  {d['difference']}, {d['metric']}: {d['mean']:.4g} [{d['ci95_low']:.4g}, "
                      f"{d['ci95_high']:.4g}], {'larger than' if d['larger_than_uncertainty'] else 'within'} its "
                      f"uncertainty" for d in diffs]
        lines.append(f"means with 95 % intervals and paired differences {out / 'population.md'}")
    lines.append(f"report {out / 'report.md'}, tables {out / 'summary.csv'} and {out / 'runs.csv'}")
    from sim.experiments.run import run_warnings

    # after the results, one line per run that must not go unnoticed; the exit code stays as it is
    lines += [f"warning: {r.case.label}: {w}" for r in result.results if r.ok and r.metrics
              for w in run_warnings(r.metrics)]
    if result.results and not any(r.ok for r in result.results):  # nothing to compare: a script must see it
        lines.append("every run failed")
        return "\n".join(lines), 1
    return "\n".join(lines)


class _Bar:
    """tqdm progress bar fed with (done, total) ticks; shown only after 2 s of wall time."""

    def __init__(self, label: str) -> None:
        from tqdm import tqdm

        self._tqdm = tqdm(total=None, desc=label, unit="tick", delay=2.0, leave=False, file=sys.stderr,
                          disable=not sys.stderr.isatty())

    def update(self, done: int, total: int) -> None:
        if self._tqdm.total != total:
            self._tqdm.total = total
        if done % 100 == 0 or done == total:
            self._tqdm.update(done - self._tqdm.n)

    def close(self) -> None:
        self._tqdm.close()


def _progress_bar(label: str) -> _Bar | None:
    try:
        return _Bar(label)
    except ImportError:  # tqdm is a declared dependency; a bare checkout may lack it
        return None


class _UserError(Exception):
    """A failure to report in one line (file system and the like)."""


#: commands that simulate, so run the compiled kernels
_SIMULATING = ("run", "compare", "sweep", "bench", "wallmap")


def _stderr_is_terminal() -> bool:
    return sys.stderr.isatty()


def _kernels_cached() -> bool:
    """Whether numba's on-disk cache holds the largest compiled kernels (False only when surely not)."""
    import os

    from controllers.hqp import kernels as hqp_kernels
    from sim.physics import plant

    try:
        paths = [k._cache._cache_file._index_path for k in (hqp_kernels.solve_levels_fast, plant._cuff_kernel)]
    except AttributeError:  # numba's cache layout changed: say nothing
        return True
    return all(os.path.exists(p) for p in paths)


def _floats(text: str, n: int, option: str, what: str) -> tuple[float, ...]:
    """``n`` comma-separated finite numbers, or one line naming ``option``."""
    import math

    try:
        values = tuple(float(x) for x in text.split(","))
    except ValueError:
        values = ()
    if len(values) != n or not all(math.isfinite(v) for v in values):
        raise _UserError(f"{option} must be {what}, got {text!r}")
    return values


def _cmd_impedance(args: argparse.Namespace, parser: argparse.ArgumentParser) -> str:
    import math

    from sim.analysis.impedance import DEFAULT_THRESHOLD_N_S_PER_M
    from sim.experiments.impedance import felt_impedance, summary_rows, write_impedance
    from sim.loop.scenario import load_scenario
    from sim.output.report import text_table
    from sim.physics.fixture import HandFixture, Multisine

    direction = _floats(args.direction, 3, "--direction", "three comma-separated numbers X,Y,Z (not all zero)")
    norm = math.sqrt(sum(x * x for x in direction))
    if norm == 0:
        parser.error(f"--direction must not be zero, got {args.direction!r}")
    lo, hi = _floats(args.band, 2, "--band", "two comma-separated frequencies LO,HI [Hz]")
    if not 0 < lo < hi:
        parser.error(f"--band must be 0 < LO < HI [Hz], got {args.band!r}")
    if not (math.isfinite(args.amplitude) and args.amplitude > 0):
        parser.error(f"--amplitude must be a finite displacement > 0 [m], got {args.amplitude}")
    if args.amplitude > 0.05:
        parser.error(f"--amplitude must be at most 0.05 m (a small motion about the posture), got {args.amplitude}")
    threshold = DEFAULT_THRESHOLD_N_S_PER_M if args.threshold is None else args.threshold
    if not (math.isfinite(threshold) and threshold > 0):
        parser.error(f"--threshold must be a finite impedance > 0 [N s/m], got {args.threshold}")
    if args.duration is not None and not (math.isfinite(args.duration) and 8.0 <= args.duration <= 600.0):
        parser.error(f"--duration must be between 8 and 600 s (at least the settling time and one 4 s period), "
                     f"got {args.duration}")
    if args.seed is not None and args.seed < 0:
        parser.error(f"--seed must be >= 0, got {args.seed}")
    scenario = load_scenario(args.scenario)
    names = [c for c in (args.controllers or "").split(",") if c.strip()] + list(args.controller)
    controllers = list(dict.fromkeys(c.strip() for c in names)) or list(scenario.controllers)
    for c in controllers:
        if c not in scenario.controllers:
            raise _UserError(f"--controller: scenario {scenario.name!r} supports the controllers "
                             f"{', '.join(scenario.controllers)}; got {c!r}")
    out = _output_folder(args.out, Path("runs") / f"impedance-{scenario.name}")
    _writable_folder(out, "--out" if args.out else "output folder")
    start_rad = None
    if args.posture is not None:
        from sim.loop.simulation import build_assembly

        if args.through_wearer:
            parser.error("--posture sets the robot's posture alone; with --through-wearer the scenario's start "
                         "posture applies")
        exo = build_assembly(scenario).exo
        names = ", ".join(exo.joint_names)
        start_rad = tuple(math.radians(a) for a in _floats(
            args.posture, exo.nq, "--posture", f"{exo.nq} comma-separated joint angles [deg] ({names})"))
        lower, upper = exo.model.lowerPositionLimit, exo.model.upperPositionLimit
        for name, a, lo_q, hi_q in zip(exo.joint_names, start_rad, lower, upper):
            if not lo_q <= a <= hi_q:
                raise _UserError(f"--posture: {name} = {math.degrees(a):g} deg is outside its range "
                                 f"[{math.degrees(lo_q):g}, {math.degrees(hi_q):g}] deg")
    fixture = HandFixture(Multisine(args.amplitude, (lo, hi)), direction=tuple(x / norm for x in direction),
                          lateral=args.lateral, start_rad=start_rad)
    t0 = time.perf_counter()
    results = felt_impedance(scenario, controllers, fixture, duration_s=args.duration,
                             threshold_N_s_per_m=threshold, seed=args.seed, through_wearer=args.through_wearer)
    paths = write_impedance(results, out, scenario_name=scenario.name, fixture=fixture,
                            through_wearer=args.through_wearer)
    header, rows = summary_rows(results)
    return (f"{text_table(header, rows)}\n(run time {time.perf_counter() - t0:.1f} s)\n"
            f"report {paths['report']}, table {paths['csv']}, Bode plot {paths['png']}")


def _cmd_coverage(args: argparse.Namespace, parser: argparse.ArgumentParser) -> str:
    from models.coupling import Registration
    from models.human import SUBJECTS
    from sim.analysis.coverage import CoverageParams, required_share
    from sim.experiments.coverage import run_coverage, write_coverage

    if args.subject not in SUBJECTS:
        parser.error(f"--subject must be one of {', '.join(SUBJECTS)}, got {args.subject!r}")
    misalignment = _floats(args.misalignment, 3, "--misalignment", "three comma-separated offsets X,Y,Z [m]")
    Registration(misalignment_m=misalignment)  # a bad offset: one line, before any folder is made
    sites = {}
    for item in args.site:
        name, sep, frame = item.partition("=")
        if not sep or not name or not frame:
            parser.error(f"--site expects NAME=FRAME, got {item!r}")
        sites[name] = frame
    if args.exo is None and (sites or args.hand):
        parser.error("--site and --hand go with --exo URDF")
    if args.exo is not None and not args.hand:
        parser.error("--exo needs --hand FRAME (the frame of the hand point)")
    for option, value in (("--plane-step", args.plane_step), ("--elevation-step", args.elevation_step),
                          ("--axial-step", args.axial_step)):
        if not 0.5 <= value <= 90.0:
            parser.error(f"{option} must be between 0.5 and 90 deg, got {value}")
    params = CoverageParams.grid_deg(args.plane_step, args.elevation_step, args.axial_step)
    out = _output_folder(args.out, Path("runs") / f"coverage-{args.subject}")
    _writable_folder(out, "--out" if args.out else "output folder")
    t0 = time.perf_counter()
    cmap, exo = run_coverage(args.subject, girdle=args.girdle, misalignment_m=misalignment,
                             exo_urdf=None if args.exo is None else Path(args.exo), sites=sites,
                             hand_frame=args.hand, params=params)
    dt = time.perf_counter() - t0
    paths = write_coverage(cmap, exo, out, label=args.exo or "", run_time_s=dt)
    share, n = required_share(cmap)
    share_cuff, _ = required_share(cmap, max_cuff_offset_m=params.max_cuff_offset_m)
    return (f"daily-living region followed: {share * 100:.1f} % of {n} samples "
            f"({share_cuff * 100:.1f} % with every cuff within {params.max_cuff_offset_m * 1000:.0f} mm)\n"
            f"(run time {dt:.1f} s)\nreport {paths['report']}, table {paths['csv']}, maps {paths['png']}, "
            f"{paths['ranges']}")


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the console script; returns the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    # shown, like the progress bars, only to a person at a terminal: scripts keep one-line errors
    if args.command in _SIMULATING and _stderr_is_terminal() and not _kernels_cached():
        print(f"{PROG}: first run after installation: compiling the numba kernels of the control tick "
              "(about a minute, once; they are cached)", file=sys.stderr)
    try:
        message = args.func(args, parser)
    except (SandboxError, _UserError) as e:
        print(f"{PROG}: error: {e}", file=sys.stderr)
        return 1
    status = 0
    if isinstance(message, tuple):  # (message, exit status): a result that is printed, yet not a success
        message, status = message
    if message:
        print(message)
    return status


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
