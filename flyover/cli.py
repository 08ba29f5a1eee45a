"""The `flyover` command.

Exit codes: 0 all well, 1 failed, 2 bad input (the message says what and where).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from .errors import FlyoverInputError

EXAMPLES = {
    "template": "flyover template -o my-campaign.yaml",
    "check": "flyover check demo/campaign.yaml",
    "simulate": "flyover simulate demo/scenario.yaml --out demo/data",
    "calibrate": ("flyover calibrate cal-ch07.wav --channel 7 --level-db 94 --frequency-hz 1000 "
                  "--update calibration.csv"),
    "stage": "flyover stage align --campaign demo/campaign.yaml --pass pass-1 --out results/pass-1",
}


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="flyover", description="Array processing for outdoor flyover noise campaigns.",
        epilog="Run a whole campaign with: snakemake --cores 2 --configfile my-campaign.yaml",
        formatter_class=argparse.RawDescriptionHelpFormatter)
    from . import __version__
    p.add_argument("--version", action="version", version=f"flyover {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    def add(name, help_text):
        return sub.add_parser(name, help=help_text, description=help_text,
                              epilog=f"example:\n  {EXAMPLES[name]}",
                              formatter_class=argparse.RawDescriptionHelpFormatter)

    t = add("template", "write a commented campaign file to start from")
    t.add_argument("-o", "--output", type=Path, help="file to write (default: print)")

    c = add("check", "validate a campaign and every file it names, and summarise each pass")
    c.add_argument("campaign", type=Path)

    s = add("simulate", "write a simulated campaign (recordings, layout, tracks) from a scenario")
    s.add_argument("scenario", type=Path)
    s.add_argument("--out", type=Path, required=True, help="folder for the generated files")

    k = add("calibrate", "derive pa_per_unit from a sound-calibrator recording")
    k.add_argument("recording", type=Path)
    k.add_argument("--level-db", type=float, default=94.0, help="calibrator level (dB re 20 uPa)")
    k.add_argument("--frequency-hz", type=float, default=1000.0)
    k.add_argument("--channel", type=int, help="the one channel with the calibrator on it "
                                               "(default: every channel has a calibrator)")
    k.add_argument("--update", type=Path, help="calibration CSV to update (or create)")

    g = add("stage", "run one workflow step (called by the Snakefile)")
    g.add_argument("name", choices=["align", "image", "levels"])
    g.add_argument("--campaign", type=Path, required=True)
    g.add_argument("--pass", dest="pass_name", required=True)
    g.add_argument("--out", type=Path, required=True, help="the pass's result folder")
    g.add_argument("--threads", type=int, default=1, help="threads for the compiled kernels")
    return p


def main(argv=None) -> int:
    args = _parser().parse_args(argv)
    try:
        return _dispatch(args)
    except FlyoverInputError as exc:
        print(exc.message, file=sys.stderr)
        return 2


def _dispatch(args) -> int:
    if args.command == "template":
        text = (Path(__file__).parent / "template.yaml").read_text()
        if args.output:
            from .io.atomic import write_text
            write_text(args.output, text)
            print(f"wrote {args.output}")
        else:
            print(text, end="")
        return 0
    if args.command == "check":
        from .io.config import load_campaign
        from .stages.check import check_campaign, format_summary
        campaign = load_campaign(args.campaign)
        print(format_summary(campaign, check_campaign(campaign)))
        return 0
    if args.command == "simulate":
        from .stages.simulate import write_campaign
        write_campaign(args.scenario, args.out)
        print(f"wrote the simulated campaign to {args.out}")
        return 0
    if args.command == "calibrate":
        from .stages.calibrate import run as calibrate
        print(calibrate(args.recording, args.level_db, args.frequency_hz, args.channel,
                        args.update))
        return 0
    if args.command == "stage":
        from .io.config import load_campaign
        campaign = load_campaign(args.campaign)
        if args.name == "align":
            from .stages import align
            align.run(campaign, args.pass_name, args.out / "alignment.json",
                      args.out / "track.png")
        elif args.name == "image":
            from .stages import image
            image.run(campaign, args.pass_name, args.out / "alignment.json", args.out,
                      args.threads)
        elif args.name == "levels":
            from .stages import levels
            levels.run(campaign, args.pass_name, args.out)
        return 0
    raise AssertionError(args.command)
