"""The `flyover` command.

Exit codes: 0 all well, 1 failed, 2 bad input (the message says what and where).
"""

from __future__ import annotations

import argparse
import subprocess
import sys
from pathlib import Path

from .errors import FlyoverInputError

EXAMPLES = {
    "template": "flyover template -o my-campaign.yaml",
    "check": "flyover check demo/campaign.yaml",
    "simulate": "flyover simulate demo/scenario.yaml --out demo/data",
    "calibrate": ("flyover calibrate cal-ch07.wav --channel 7 --level-db 94 --frequency-hz 1000 "
                  "--update calibration.csv"),
    "run": "flyover run my-campaign.yaml --cores 2\n  flyover run my-campaign.yaml --profile "
           "config/profiles/slurm",
    "plan": "flyover plan my-campaign.yaml",
    "report": "flyover report my-campaign.yaml --open",
    "stage": "flyover stage align --campaign demo/campaign.yaml --pass pass-1 --out results/pass-1",
    "stage-campaign": "flyover stage-campaign summary --campaign demo/campaign.yaml",
}
RULES = Path(__file__).resolve().parent / "rules.smk"


def _parser() -> argparse.ArgumentParser:
    from . import __version__
    p = argparse.ArgumentParser(
        prog="flyover", description="Array processing for outdoor flyover noise campaigns.",
        epilog="Run a whole campaign with: flyover run my-campaign.yaml",
        formatter_class=argparse.RawDescriptionHelpFormatter)
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

    r = add("run", "run a whole campaign through the Snakemake workflow")
    r.add_argument("campaign", type=Path)
    r.add_argument("--cores", default="2", help="cores for local runs (default 2; 'all')")
    r.add_argument("--profile", help="a Snakemake profile folder, e.g. config/profiles/slurm")
    r.add_argument("snakemake_args", nargs=argparse.REMAINDER,
                   help="anything after -- goes to snakemake unchanged")

    n = add("plan", "show what a run would redo, pass by pass, and why")
    n.add_argument("campaign", type=Path)

    o = add("report", "print the path of a campaign's report (or open it)")
    o.add_argument("campaign", type=Path)
    o.add_argument("--open", action="store_true", help="open it in the default browser")

    g = add("stage", "run one per-pass workflow step (called by the workflow)")
    g.add_argument("name", choices=["align", "image", "levels", "qc"])
    g.add_argument("--campaign", type=Path, required=True)
    g.add_argument("--pass", dest="pass_name", required=True)
    g.add_argument("--out", type=Path, required=True, help="the pass's result folder")
    g.add_argument("--threads", type=int, default=1, help="threads for the compiled kernels")

    h = add("stage-campaign", "run one campaign-level workflow step (called by the workflow)")
    h.add_argument("name", choices=["summary", "report"])
    h.add_argument("--campaign", type=Path, required=True)
    return p


def main(argv=None) -> int:
    args = _parser().parse_args(argv)
    try:
        return _dispatch(args)
    except FlyoverInputError as exc:
        print(exc.message, file=sys.stderr)
        return 2
    except BrokenPipeError:  # output piped into `head` and the like
        sys.stderr.close()
        return 0


def _snakemake(campaign: Path, *extra: str, capture: bool = False):
    # Run in the current folder, like `snakemake` itself: both then share one metadata store.
    cmd = [sys.executable, "-m", "snakemake", "--snakefile", str(RULES),
           "--configfile", str(Path(campaign).resolve()), *extra]
    return subprocess.run(cmd, capture_output=capture, text=True)


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
    if args.command == "run":
        from .io.config import load_campaign
        load_campaign(args.campaign)  # bad input stops here, with its message
        extra = [a for a in args.snakemake_args if a != "--"]
        extra = (["--profile", args.profile] if args.profile else ["--cores", str(args.cores)]) \
            + extra
        return 0 if _snakemake(args.campaign, *extra).returncode == 0 else 1
    if args.command == "plan":
        from .io.config import load_campaign
        from .workflow import format_plan, parse_dry_run
        load_campaign(args.campaign)
        res = _snakemake(args.campaign, "--dry-run", "--cores", "1", capture=True)
        if res.returncode != 0:
            print(res.stderr, file=sys.stderr)
            return 1
        print(format_plan(parse_dry_run(res.stdout + res.stderr)))
        return 0
    if args.command == "report":
        from .io.config import load_campaign
        path = load_campaign(args.campaign).output / "report.html"
        if not path.exists():
            print(f"no report yet: run `flyover run {args.campaign}` first", file=sys.stderr)
            return 1
        print(path)
        if args.open:
            import webbrowser
            webbrowser.open(path.as_uri())
        return 0
    from .io.config import load_campaign
    campaign = load_campaign(args.campaign)
    if args.command == "stage-campaign":
        if args.name == "summary":
            from .stages import campaign as summary
            summary.run(campaign, campaign.output)
        else:
            from .stages import report
            report.run(campaign, campaign.output, campaign.output / "report.html")
        return 0
    if args.name == "align":
        from .stages import align
        align.run(campaign, args.pass_name, args.out / "alignment.json", args.out / "track.png")
    elif args.name == "image":
        from .stages import image
        image.run(campaign, args.pass_name, args.out / "alignment.json", args.out, args.threads)
    elif args.name == "levels":
        from .stages import levels
        levels.run(campaign, args.pass_name, args.out)
    else:
        from .stages import qc
        qc.run(campaign, args.pass_name, args.out)
    return 0
