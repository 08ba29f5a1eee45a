"""The `flyover` command.

Exit codes: 0 all well, 1 failed, 2 bad input (the message says what and where).
"""

from __future__ import annotations

import argparse
import math
import os
import subprocess
import sys
from pathlib import Path

from flyover.geometry.flight_passes import PassTolerances
from flyover.model.errors import FlyoverInputError, file_system_message

EXAMPLES = {
    "template": "flyover template -o my-campaign.yaml",
    "check": "flyover check demo/campaign.yaml",
    "find-passes": "flyover find-passes flight-day.yaml --flight morning",
    "quick-look": "flyover quick-look flight-day.yaml --flight morning",
    "simulate": "flyover simulate demo/scenario.yaml --out demo/data",
    "calibrate": ("flyover calibrate cal-ch07.wav --channel 7 --level-db 94 --frequency-hz 1000 "
                  "--update calibration.csv"),
    "run": "flyover run my-campaign.yaml --cores 2\n  flyover run my-campaign.yaml --profile "
           "config/profiles/slurm",
    "plan": "flyover plan my-campaign.yaml",
    "array-plan": "flyover array-plan demo/data/layout.csv --height-m 35 --bands 200 3150 "
                  "--points 1.1 0 -1.5 0 --figure psf.png",
    "report": "flyover report my-campaign.yaml --open",
    "view": "flyover view my-campaign.yaml",
    "compare": ("flyover compare demo/campaign.yaml --labels cruise-60 cruise-80\n"
                "  flyover compare spring.yaml autumn.yaml --labels cruise-60 cruise-60\n"
                "  flyover compare demo/campaign.yaml --truth\n"
                "  flyover compare team-store --labels spring:cruise-60 autumn:cruise-60"),
    "stage": "flyover stage align --campaign demo/campaign.yaml --pass pass-1 --out results/pass-1",
    "stage-campaign": "flyover stage-campaign summary --campaign demo/campaign.yaml",
}


def _parser() -> argparse.ArgumentParser:
    from flyover import __version__
    p = argparse.ArgumentParser(
        prog="flyover", description="Array processing for outdoor flyover noise campaigns.",
        epilog="Run a whole campaign with: flyover run my-campaign.yaml",
        formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--version", action="version", version=f"flyover {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    def add(name, help_text, internal=False):
        # Internal commands (called by the workflow) stay out of the top-level help.
        listed = {} if internal else {"help": help_text}
        return sub.add_parser(name, **listed, description=help_text,
                              epilog=f"example:\n  {EXAMPLES[name]}",
                              formatter_class=argparse.RawDescriptionHelpFormatter)

    t = add("template", "write a commented campaign file to start from")
    t.add_argument("-o", "--output", type=Path, help="file to write (default: print)")

    c = add("check", "validate a campaign and every file it names, and summarise each pass")
    c.add_argument("campaign", type=Path, help="the campaign file (YAML)")

    s = add("simulate", "write a simulated campaign (recordings, layout, tracks) from a scenario")
    s.add_argument("scenario", type=Path, help="the scenario file (YAML), e.g. demo/scenario.yaml")
    s.add_argument("--out", type=Path, required=True, help="folder for the generated files")
    s.add_argument("--workers", type=int, default=1,
                   help="passes simulated at a time, each in a process of its own (default 1)")

    k = add("calibrate", "derive pa_per_unit from a sound-calibrator recording")
    k.add_argument("recording", type=Path, help="the calibrator recording (WAV/FLAC)")
    k.add_argument("--level-db", type=float, default=94.0,
                   help="calibrator level (default 94 dB re 20 uPa)")
    k.add_argument("--frequency-hz", type=float, default=1000.0,
                   help="calibrator frequency (default 1000 Hz)")
    k.add_argument("--channel", type=int, help="the one channel with the calibrator on it "
                                               "(default: every channel has a calibrator)")
    k.add_argument("--update", type=Path,
                   help="calibration CSV to update or create (default: print only)")

    a = add("array-plan", "what an array layout resolves at a flyover height, per band "
                          "(no recording needed)")
    a.add_argument("layout", type=Path, help="the layout CSV")
    a.add_argument("--height-m", type=float, required=True,
                   help="height of the vehicle above the array (m)")
    a.add_argument("--bands", type=float, nargs=2, metavar=("MIN_HZ", "MAX_HZ"),
                   default=(200.0, 5000.0), help="one-third-octave band range (default 200 5000)")
    a.add_argument("--points", type=float, nargs=4, metavar=("X1", "Y1", "X2", "Y2"),
                   help="two body points (x forward, y starboard, m): from which band they "
                        "separate (default: none)")
    a.add_argument("--heading-deg", type=float, default=90.0,
                   help="flight direction over the array, clockwise from north (default 90)")
    a.add_argument("--speed-of-sound", type=float, default=343.0,
                   help="m/s (default 343)")
    a.add_argument("--figure", type=Path, help="PNG of the point-spread per band (default: "
                                               "none)")

    r = add("run", "run a whole campaign through the Snakemake workflow")
    r.add_argument("campaign", type=Path, help="the campaign file (YAML)")
    r.add_argument("--cores", default="2", help="cores for local runs (default 2; 'all')")
    r.add_argument("--profile", help="a Snakemake profile folder, e.g. config/profiles/slurm "
                                     "(default: none, run locally)")
    r.add_argument("--verbose", action="store_true",
                   help="show Snakemake's own log (default: it goes to <output>/logs/"
                        "workflow.log)")
    r.add_argument("snakemake_args", nargs=argparse.REMAINDER,
                   help="anything after -- goes to snakemake unchanged (default: nothing)")

    f = add("find-passes", "find the passes in whole flights (the campaign file's 'flights'): "
                           "every flyover of the array, as flown, and the entries to paste")
    f.add_argument("campaign", type=Path, help="the campaign file (YAML) with its flights")
    f.add_argument("--flight", action="append", metavar="NAME",
                   help="search this flight (repeatable; default: every flight)")
    f.add_argument("--max-offset-m", type=float, default=PassTolerances.max_offset_m,
                   help="closest approach in plan to the array centre at most "
                        f"(default {PassTolerances.max_offset_m:g} m)")
    f.add_argument("--course-tolerance-deg", type=float, default=PassTolerances.course_deg,
                   help="course within this of its mean over the analysed angles "
                        f"(default {PassTolerances.course_deg:g} deg)")
    f.add_argument("--height-tolerance-m", type=float, default=PassTolerances.height_m,
                   help=f"height within this of its mean (default {PassTolerances.height_m:g} m)")
    f.add_argument("--speed-tolerance-pct", type=float, default=PassTolerances.speed_pct,
                   help="speed within this percentage of its mean "
                        f"(default {PassTolerances.speed_pct:g} %%)")
    f.add_argument("--out", type=Path, help="folder for found-passes.yaml and found-passes.csv "
                                            "(default: the campaign's output folder)")

    q = add("quick-look", "after a pass, within a minute: must it be flown again? (the checks "
                          "that need no imaging, the acoustic track check and a coarse map "
                          "near overhead; not a signed result)")
    q.add_argument("campaign", type=Path, help="the campaign file (YAML)")
    q.add_argument("pass_name", nargs="?", metavar="PASS",
                   help="a pass of the campaign (default: with --flight, its newest flyover)")
    q.add_argument("--flight", metavar="NAME",
                   help="look at the newest flyover of this flight (key flights) so far")
    q.add_argument("--out", type=Path, help="folder to write into (default: "
                                            "OUTPUT/quick-look/PASS)")

    n = add("plan", "show what a run would redo, pass by pass, and why")
    n.add_argument("campaign", type=Path, help="the campaign file (YAML)")

    m = add("compare", "compare one label with another (of one campaign or of several): "
                       "differences of the mean levels and metrics with their 90 % intervals")
    m.add_argument("campaigns", type=Path, nargs="+", metavar="source",
                   help="the campaign file of both labels, or of label A then of label B; or "
                        "any number of results folders and stores, labels then given as "
                        "CAMPAIGN:LABEL")
    m.add_argument("--labels", nargs=2, metavar=("A", "B"),
                   help="the labels compared: the tables give B minus A")
    m.add_argument("--truth", nargs="?", const="", type=str, metavar="SCENARIO",
                   help="instead of labels, a simulated campaign against its truth: every "
                        "level at 1 m minus what the scenario's sources emit (default "
                        "scenario: the campaign file's 'scenario' key)")

    o = add("report", "print the path of a campaign's report (or open it)")
    o.add_argument("campaign", type=Path, help="the campaign file (YAML)")
    o.add_argument("--open", action="store_true",
                   help="open it in the default browser (default: print its path)")

    v = add("view", "open a campaign's interactive results viewer in the browser (a file of "
                    "the results folder: no server, nothing fetched from outside it)")
    v.add_argument("campaign", type=Path, help="the campaign file (YAML)")
    v.add_argument("--print", dest="print_only", action="store_true",
                   help="print the page's path only (default: also open it)")

    g = add("stage", "run one per-pass workflow step (called by the workflow)", internal=True)
    g.add_argument("name", help="the step (a per-pass stage of flyover.pipeline)")
    g.add_argument("--campaign", type=Path, default=_campaign_from_environment(),
                   help="campaign file (default: $FLYOVER_CAMPAIGN, set by the workflow)")
    g.add_argument("--pass", dest="pass_name", required=True, help="the pass's name")
    g.add_argument("--out", type=Path, help="the pass's result folder (default: the campaign's "
                                            "output folder / the pass)")
    g.add_argument("--threads", type=int, default=1,
                   help="threads for the compiled kernels (default 1)")

    h = add("stage-campaign", "run one campaign-level workflow step (called by the workflow)",
            internal=True)
    h.add_argument("name", help="the step (a campaign stage of flyover.pipeline)")
    h.add_argument("--campaign", type=Path, default=_campaign_from_environment(),
                   help="campaign file (default: $FLYOVER_CAMPAIGN, set by the workflow)")
    return p


def _page(args) -> int:
    """Print the path of the report or the viewer, and open it in the browser when asked (the
    viewer by default). A viewer missing from results made before it existed is written from
    them first."""
    from flyover.io.config import load_campaign
    from flyover.io.results import report, viewer
    campaign = load_campaign(args.campaign)
    page = report if args.command == "report" else viewer
    path = campaign.output / page.NAME
    if not path.exists() and page is viewer and (campaign.output / report.NAME).exists():
        from flyover.pipeline import viewer as viewer_step
        viewer_step.run(campaign, campaign.output)
    if not path.exists():
        print(f"no {args.command} page yet: run `flyover run {args.campaign}` first",
              file=sys.stderr)
        return 1
    print(path)
    if getattr(args, "open", False) or (page is viewer and not args.print_only):
        import webbrowser
        webbrowser.open(path.as_uri())
    return 0


def _compare(args) -> int:
    """B against A, written beside the (first) campaign's results; the tables' paths printed
    with the differences whose interval excludes zero."""
    from flyover.io.config import load_campaign
    from flyover.pipeline._compare import sides_from_sources, write_comparison
    if args.truth is not None:
        return _compare_with_truth(args)
    if args.labels is None:
        raise FlyoverInputError("nothing to compare", "flyover compare",
                                "--labels A B, or --truth for a simulated campaign", "neither")
    a, b, out = sides_from_sources(args.campaigns, args.labels, load_campaign=load_campaign)
    folder = write_comparison(out, a, b)
    from flyover.io.results.comparison import (COMPARED_METRIC_NAMES, COMPARED_METRICS,
                                               COMPARED_OVERALL)
    overall = COMPARED_OVERALL.read(folder)
    near = overall[(overall["quantity"] == "A-weighted")
                   & ((overall["polar_bin_deg"] - 90.0).abs() <= 10.0)]
    for _, r in near.iterrows():
        if math.isfinite(r["ci90_low_db"]):
            verdict = (f"90 % interval [{r['ci90_low_db']:+.1f}, {r['ci90_high_db']:+.1f}] dB: "
                       + ("differs" if r["differs"] else "no difference shown"))
        else:
            verdict = "cannot tell: no interval with fewer than two passes a side"
        print(f"{r['region']} A-weighted at {r['polar_bin_deg']:g} deg: "
              f"{r['difference_db']:+.1f} dB, {verdict}")
    for _, r in COMPARED_METRICS.read(folder).iterrows():
        # A metric neither label measured in any pass has no difference: say so, not 'nan'.
        if not math.isfinite(r["difference_db"]):
            print(f"{COMPARED_METRIC_NAMES[r['metric']]}: no value on one side "
                  f"({int(r['n_a'])} passes of A, {int(r['n_b'])} of B with one)")
            continue
        print(f"{COMPARED_METRIC_NAMES[r['metric']]}: {r['difference_db']:+.1f} dB, "
              + (f"90 % interval [{r['ci90_low_db']:+.1f}, {r['ci90_high_db']:+.1f}] dB"
                 if math.isfinite(r["ci90_low_db"]) else "no interval"))
    print(f"tables and figure: {folder}")
    return 0


def _compare_with_truth(args) -> int:
    """A simulated campaign's levels against its scenario's truth; the summary printed."""
    from flyover.io.config import load_campaign
    from flyover.io.results.comparison import MEASURED_MINUS_TRUE
    from flyover.pipeline._truth import truth_summary, write_truth_comparison
    if len(args.campaigns) != 1 or args.labels is not None:
        raise FlyoverInputError("--truth compares one campaign with its own scenario",
                                "flyover compare", "one campaign file and no --labels",
                                f"{len(args.campaigns)} campaign files"
                                + (", --labels" if args.labels else ""))
    campaign = load_campaign(args.campaigns[0])
    scenario = Path(args.truth) if args.truth else campaign.scenario
    if scenario is None:
        raise FlyoverInputError("no scenario to take the truth from", str(args.campaigns[0]),
                                "a 'scenario' key, or --truth SCENARIO", "neither")
    path = write_truth_comparison(campaign, campaign.output, scenario)
    s = truth_summary(MEASURED_MINUS_TRUE.read(path.parent))
    if s["n"]:
        print(f"resolved levels: {s['n']}; measured minus true {s['mean_db']:+.2f} dB on "
              f"average (standard deviation {s['std_db']:.2f} dB); the 90 % interval holds "
              f"the truth for {100 * s['within']:.1f} %")
    else:
        print("no resolved level has a simulated source in its region")
    print(f"table: {path}")
    return 0


def _campaign_from_environment() -> Path | None:
    value = os.environ.get("FLYOVER_CAMPAIGN")
    return Path(value) if value else None


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
    except OSError as exc:  # a full disk, a read-only folder: say what, where, and stop
        print(file_system_message(exc), file=sys.stderr)
        return 1


def _find_passes(args) -> int:
    """Print the flyovers of the flights and write the pass entries."""
    from flyover.pipeline.find_passes import find_day, flyover_table, write_found
    tolerances = PassTolerances(max_offset_m=args.max_offset_m,
                                course_deg=args.course_tolerance_deg,
                                height_m=args.height_tolerance_m,
                                speed_pct=args.speed_tolerance_pct)
    campaign, flyovers, labels = find_day(args.campaign, flights=args.flight,
                                          tolerances=tolerances)
    table = flyover_table(flyovers, labels)
    shown = table[["flight", "pass", "overhead_utc", "course_deg", "height_m", "speed_m_s",
                   "offset_m", "rotor_rpm", "label", "reasons"]]
    print(shown.to_string(index=False, float_format=lambda v: f"{v:.1f}") if len(shown)
          else "no flyover of the array in the flights")
    entries, csv = write_found(args.out or campaign.output, flyovers, labels,
                               source=campaign.config_path.name)
    print(f"{int(table['is_pass'].sum()) if len(table) else 0} passes of {len(table)} flyovers; "
          f"entries in {entries}, the table in {csv}")
    return 0


def _quick_look(args) -> int:
    """Print the quick look's verdict, findings and levels near overhead."""
    from flyover.workflow.quick_look import FOLDER, quick_look
    campaign, name, peers, known = _quick_look_pass(args)
    folder = args.out or campaign.output / FOLDER / name
    look = quick_look(campaign, name, folder, peers=peers, also=known)
    verdict = ("FLY AGAIN" if look["fly_again"] else
               "keep it" + (" (flagged: its numbers stand, with the reasons)"
                            if look["status"] == "flagged" else ""))
    print(f"quick look of {name} ({look['label'] or 'no label'}): {look['status']}: {verdict}")
    for f in look["findings"]:
        print(f"  - {f['text']}")
    for region, o in look["overall"].items():
        level = "no level" if o["a_weighted_1m_db"] is None else f"{o['a_weighted_1m_db']:.1f} dB"
        print(f"  {region}: A-weighted at 1 m near overhead {level} ({o['bands']} bands)")
    print(f"  not checked: {'; '.join(look['not_checked'])}")
    print(f"  {look['seconds']:.0f} s; written to {folder} (a quick look, not a signed result)")
    return 0


def _quick_look_pass(args):
    """The campaign and pass a quick look is of, the label's other passes and what is already
    known against it: a named pass (its label's passes the workflow has aligned), or the newest
    flyover of a flight (a pass of its own, cut by its proposed span; its label's passes are
    the flight's earlier ones; the finder's reasons it was not flown as a pass)."""
    from dataclasses import replace

    from flyover.io.config import load_campaign
    if args.flight is None:
        if args.pass_name is None:
            raise FlyoverInputError("no pass to look at", "flyover quick-look",
                                    "a pass name, or --flight NAME for its newest flyover")
        return load_campaign(args.campaign), args.pass_name, None, []
    from flyover.pipeline.find_passes import find_day
    flights, flyovers, labels = find_day(args.campaign, flights=[args.flight])
    if not flyovers:
        raise FlyoverInputError("no flyover of the array in the flight yet",
                                f"{args.campaign}, flight {args.flight}",
                                "a closest approach within the finder's offset", "none")
    newest, label = flyovers[-1], labels[-1]
    name = args.pass_name or f"{args.flight}-newest"
    spec = replace(flights.passes[args.flight], name=name, span_utc_ns=newest.span_utc_ns,
                   label=label)
    peers = {f"{args.flight}@{f.found.overhead_s:.0f}s": (f.found.height_m, f.found.speed_m_s)
             for f, lab in zip(flyovers[:-1], labels) if label and lab == label}
    return replace(flights, passes={name: spec}), name, peers, newest.flight_findings()


def _dispatch(args) -> int:
    if args.command == "template":
        text = (Path(__file__).parent / "template.yaml").read_text()
        if args.output:
            from flyover.io.atomic import write_text
            write_text(args.output, text)
            print(f"wrote {args.output}")
        else:
            print(text, end="")
        return 0
    if args.command == "check":
        from flyover.io.config import load_campaign
        from flyover.pipeline.check import check_campaign, format_summary
        campaign = load_campaign(args.campaign)
        print(format_summary(campaign, check_campaign(campaign)))
        return 0
    if args.command == "simulate":
        from flyover.sim.demo import write_campaign
        write_campaign(args.scenario, args.out, workers=args.workers)
        print(f"wrote the simulated campaign to {args.out}")
        return 0
    if args.command == "array-plan":
        from flyover.pipeline.array_plan import plan_array
        points = None if args.points is None else [args.points[:2], args.points[2:]]
        print(plan_array(args.layout, height_m=args.height_m, band_min_hz=args.bands[0],
                         band_max_hz=args.bands[1], points_body_m=points,
                         heading_deg=args.heading_deg, c_m_s=args.speed_of_sound,
                         figure=args.figure))
        return 0
    if args.command == "calibrate":
        from flyover.pipeline.calibrate import run as calibrate
        print(calibrate(args.recording, args.level_db, args.frequency_hz, args.channel,
                        args.update))
        return 0
    if args.command == "run":
        from flyover.io.config import load_campaign
        from flyover.pipeline.check import check_campaign, check_output_folder
        from flyover.workflow.runner import run_campaign
        campaign = load_campaign(args.campaign)
        # Every bad input stops here, before any job starts; a simulated campaign whose files
        # the workflow has yet to write is checked by the stages.
        if campaign.scenario is not None and not all(p.exists() for p in campaign.input_files()):
            check_output_folder(campaign)
        else:
            check_campaign(campaign)
        extra = [a for a in args.snakemake_args if a != "--"]
        profile = args.profile
        if profile and Path(profile).exists():
            profile = str(Path(profile).resolve())  # Snakemake runs in the output folder
        extra = (["--profile", profile] if profile else ["--cores", str(args.cores)]) + extra
        return run_campaign(campaign, args.campaign, extra, verbose=args.verbose)
    if args.command == "plan":
        from flyover.io.config import load_campaign
        from flyover.workflow.dryrun import format_plan, parse_dry_run
        from flyover.workflow.runner import snakemake_command
        out = load_campaign(args.campaign).output
        res = subprocess.run(snakemake_command(args.campaign, "--dry-run", "--cores", "1"),
                             cwd=out if out.is_dir() else None, capture_output=True, text=True)
        if res.returncode != 0:
            print(res.stderr, file=sys.stderr)
            return 1
        jobs = parse_dry_run(res.stdout + res.stderr)
        print(format_plan(jobs, _changed_settings(load_campaign(args.campaign), jobs)))
        return 0
    if args.command == "compare":
        return _compare(args)
    if args.command == "find-passes":
        return _find_passes(args)
    if args.command == "quick-look":
        return _quick_look(args)
    if args.command in ("report", "view"):
        return _page(args)
    from flyover.io.config import load_campaign
    if args.campaign is None:
        raise FlyoverInputError("no campaign file", f"flyover {args.command}",
                                "--campaign FILE (or $FLYOVER_CAMPAIGN)")
    from flyover.pipeline import stage_module, stages
    scope = "campaign" if args.command == "stage-campaign" else "pass"
    stage = stage_module(args.name, scope)
    if stage is None:
        raise FlyoverInputError("no such workflow step", f"flyover {args.command}",
                                ", ".join(stages(scope)), args.name)
    campaign = load_campaign(args.campaign)
    from flyover.pipeline._forks import keep_freed_memory
    from flyover.workflow.settings_record import write_settings_record
    keep_freed_memory()
    if args.command == "stage-campaign":
        stage.run(campaign, campaign.output)
        write_settings_record(campaign.output, campaign, args.name, None)
        return 0
    out = args.out if args.out is not None else campaign.output / args.pass_name
    options = {"threads": args.threads} if args.name == "image" else {}
    try:
        stage.run(campaign, args.pass_name, out, **options)
    except OSError as exc:
        from flyover.pipeline._resources import output_bytes
        from flyover.pipeline.context import load_pass
        print(file_system_message(exc, output_bytes(campaign, load_pass(campaign,
                                                                        args.pass_name))),
              file=sys.stderr)
        return 1
    write_settings_record(campaign.output, campaign, args.name, args.pass_name)
    return 0


def _changed_settings(campaign, jobs: list[dict]) -> dict:
    """Per planned job whose settings changed, (rule, pass) -> the settings that did, against
    what the step last ran with (:mod:`flyover.workflow.settings_record`)."""
    from flyover.pipeline import stages
    from flyover.workflow.settings_record import changed_settings
    known = set(stages("pass")) | set(stages("campaign"))
    out = {}
    for j in jobs:
        if "Params have changed" not in j["reason"]:
            continue
        # Rules carry their stage's name ("campaign_summary" runs the stage "summary").
        stage = j["rule"] if j["rule"] in known else j["rule"].removeprefix("campaign_")
        if stage in known:
            out[(j["rule"], j["pass"])] = changed_settings(campaign.output, campaign, stage,
                                                           j["pass"] or None)
    return out
