"""The ``exosandbox`` command: a thin layer over the library API.

Errors a user can cause (a bad option, an unknown subject, an out-of-range
parameter, an unwritable file) print one line and exit with status 2 (usage)
or 1 (anything else); there is no traceback.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path

from models import ExoParams, HumanParams, SandboxError, Subject, exo_urdf, fit_exo, human_urdf, load_exo

__all__ = ["main", "build_parser"]

PROG = "exosandbox"


class _Parser(argparse.ArgumentParser):
    """argparse with a one-line error message."""

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
    lines = [f"{args.file}: ok, {arm.nq} revolute joints, {mass:.3f} kg moving mass"]
    lines.append(f"  {'joint':<24} {'lower rad':>10} {'upper rad':>10} {'effort N m':>11} {'vel rad/s':>10}")
    for i, name in enumerate(arm.joint_names):
        lines.append(f"  {name:<24} {m.lowerPositionLimit[i]:>10.4f} {m.upperPositionLimit[i]:>10.4f} "
                     f"{m.effortLimit[i]:>11.3f} {m.velocityLimit[i]:>10.3f}")
    for name, frame in sites.items():
        lines.append(f"  cuff site {name!r} -> frame {frame!r}")
    if args.hand:
        lines.append(f"  hand point -> frame {args.hand!r}")
    return "\n".join(lines)


class _UserError(Exception):
    """A failure to report in one line (file system and the like)."""


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the console script; returns the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        message = args.func(args, parser)
    except (SandboxError, _UserError) as e:
        print(f"{PROG}: error: {e}", file=sys.stderr)
        return 1
    if message:
        print(message)
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
