"""Readable plans from ``snakemake --dry-run --reason``: which steps re-run, per pass, and why."""

from __future__ import annotations


def parse_dry_run(text: str) -> list[dict]:
    """Jobs of a ``snakemake --dry-run --reason`` listing: rule, pass (if any) and reason."""
    jobs, job = [], None
    for line in text.splitlines():
        stripped = line.strip()
        # Grouped jobs are indented under their group: look at the stripped line.
        if stripped.split(" ")[0] in ("rule", "localrule") and stripped.endswith(":"):
            job = {"rule": stripped.split()[1].rstrip(":"), "pass": "", "reason": ""}
            jobs.append(job)
        elif job is not None and stripped.startswith("reason:"):
            job["reason"] = stripped[len("reason:"):].strip()
        elif job is not None and stripped.startswith("wildcards:"):
            for part in stripped[len("wildcards:"):].split(","):
                key, _, value = part.strip().partition("=")
                if key == "pass_name":
                    job["pass"] = value
    return [j for j in jobs if j["rule"] != "all"]


def format_plan(jobs: list[dict], changed: dict | None = None) -> str:
    """Readable text of a dry run: per pass the steps to redo and why, then campaign steps.
    ``changed`` maps (rule, pass) to the settings whose change re-runs the step (``code``: the
    package itself)."""
    changed = changed or {}
    if not jobs:
        return "nothing to redo: every result is up to date"
    lines = [f"{len(jobs)} step(s) to run:"]
    passes = sorted({j["pass"] for j in jobs if j["pass"]})
    for p in passes:
        lines.append(f"  pass {p}:")
        for j in (j for j in jobs if j["pass"] == p):
            lines.append(f"    {j['rule']:<16} {_short_reason(j, changed)}")
    rest = [j for j in jobs if not j["pass"]]
    if rest:
        lines.append("  campaign:")
        for j in rest:
            lines.append(f"    {j['rule']:<16} {_short_reason(j, changed)}")
    return "\n".join(lines)


def _short_reason(job: dict, changed: dict) -> str:
    reason = job["reason"]
    table = (("Missing output files", "results missing"),
             ("Params have changed", "config values it uses changed"),
             ("Input files updated by another job", "an earlier step re-runs"),
             ("Updated input files", "an input file changed"),
             ("Code has changed", "the rule changed"),
             ("Set of input files has changed", "the set of inputs changed"))
    found = [short for key, short in table if key in reason]
    files = _named_files(reason, "Updated input files")
    if files:
        found = [f"input changed: {files}" if f == "an input file changed" else f
                 for f in found]
    settings = changed.get((job["rule"], job["pass"]))
    if settings:
        named = ", ".join("the flyover code" if s == "code" else s for s in settings[:4])
        more = f" and {len(settings) - 4} more" if len(settings) > 4 else ""
        found = [f"changed: {named}{more}" if f == "config values it uses changed" else f
                 for f in found]
    return "; ".join(found) if found else reason[:100]


def _named_files(reason: str, key: str, most: int = 3) -> str:
    """The files Snakemake lists after ``key:`` in a reason, by name (relative to the campaign
    where they are given so), at most ``most`` of them."""
    if key + ":" not in reason:
        return ""
    listed = reason.split(key + ":", 1)[1].split(";", 1)[0]
    names = [n.strip() for n in listed.split(",") if n.strip()]
    shown = ", ".join(names[:most])
    return shown + (f" and {len(names) - most} more" if len(names) > most else "")
