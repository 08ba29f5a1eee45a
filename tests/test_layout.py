"""The package's layers: the core never imports the edges, and each seam finds its members."""

from __future__ import annotations

import ast
from pathlib import Path

import flyover
from flyover.imaging.methods import method_named, methods
from flyover.io.readers import KINDS, reader_for, readers

PACKAGE = Path(flyover.__file__).resolve().parent
CORE = ("model", "geometry", "acoustics", "forward", "imaging", "sync")
# The campaign record (flyover.campaign) sits above the physics: it holds their types.
EDGES = ("flyover.io", "flyover.pipeline", "flyover.workflow", "flyover.cli", "flyover.sim",
         "flyover.campaign")


def imported_modules(path: Path) -> set[str]:
    tree = ast.parse(path.read_text())
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            found.add(node.module)
        elif isinstance(node, ast.Import):
            found.update(a.name for a in node.names)
    return found


def test_core_never_imports_the_edges():
    # The design notes' layering: core -> nothing above it. Relative imports are not used.
    offenders = []
    for sub in CORE:
        for path in (PACKAGE / sub).rglob("*.py"):
            assert "from ." not in path.read_text(), f"{path}: use absolute imports"
            bad = [m for m in imported_modules(path) if m.startswith(EDGES)]
            offenders += [f"{path.relative_to(PACKAGE)} imports {m}" for m in bad]
    assert offenders == []


def test_the_ground_floor_stands_on_nothing():
    # model holds what every layer uses (errors, constants, plugins, the time base, the read
    # guard): it imports no other part of flyover.
    offenders = [f"{path.relative_to(PACKAGE)} imports {m}"
                 for path in (PACKAGE / "model").rglob("*.py")
                 for m in imported_modules(path)
                 if m.startswith("flyover.") and not m.startswith("flyover.model")]
    assert offenders == []


def test_stages_never_import_each_other():
    # Shared helpers are private modules (_span, _overall) or the pass context and progress.
    stages = {p.stem for p in (PACKAGE / "pipeline").glob("*.py")
              if not p.stem.startswith("_")} - {"context", "progress"}
    for stage in stages:
        mods = imported_modules(PACKAGE / "pipeline" / f"{stage}.py")
        assert not {f"flyover.pipeline.{s}" for s in stages} & mods, stage


def test_every_method_module_registers_one_method():
    # Modules named with a leading '_' hold shared steps and register nothing (as readers).
    modules = {p.stem for p in (PACKAGE / "imaging" / "methods").glob("*.py")
               if not p.stem.startswith("_")}
    assert len(methods()) == len(modules)
    assert method_named("time-domain").name == "time-domain"


def test_every_reader_module_registers_and_files_find_their_reader(tmp_path):
    # One reader per module; modules named with a leading '_' hold shared steps.
    modules = {p.stem for p in (PACKAGE / "io" / "readers").glob("*.py")
               if not p.stem.startswith("_")}
    assert sum(len(readers(k)) for k in KINDS) == len(modules)
    # RIFF/WAVE magic (Microsoft RIFF specification): found by content whatever the extension.
    odd = tmp_path / "take.dat"
    odd.write_bytes(b"RIFF\x24\x00\x00\x00WAVE" + b"\x00" * 32)
    assert reader_for("recording", odd).kind == "recording"
    assert reader_for("track", tmp_path / "track.csv").kind == "track"


def test_the_reports_provenance_lists_every_runtime_dependency():
    # The provenance table takes the installed distribution's requirements, not a list kept
    # by hand: every name of pyproject.toml's [project] dependencies (PEP 621) is in it.
    import re
    import tomllib

    from flyover.pipeline.report import runtime_dependencies
    project = tomllib.loads((PACKAGE.parent / "pyproject.toml").read_text())["project"]
    declared = [re.match(r"[A-Za-z0-9_.-]+", r).group(0) for r in project["dependencies"]]
    assert runtime_dependencies() == declared


def test_flag_columns_come_back_as_booleans(tmp_path):
    # CSV holds true/false as text; a result file's declared flags are read back as booleans,
    # so no stage parses them by hand.
    import pandas as pd

    from flyover.io.results import TableFile
    table = TableFile("t.csv", (("name", ""), ("ok", "")), flags=("ok",))
    table.write(tmp_path, pd.DataFrame({"name": ["a", "b", "c"], "ok": [True, False, None]}))
    back = table.read(tmp_path)
    assert back["ok"].dtype == bool and back["ok"].tolist() == [True, False, False]


def test_the_physics_packages_form_no_loop():
    # Floors: a package may import those below it, never one that imports it back (directly
    # or through others). The time base and the emission-time solver sit low so that imaging,
    # sync and acoustics need not import each other in a circle.
    physics = ("geometry", "acoustics", "forward", "imaging", "sync")
    edges = {p: set() for p in physics}
    for p in physics:
        for path in (PACKAGE / p).rglob("*.py"):
            for module in imported_modules(path):
                parts = module.split(".")
                if len(parts) > 1 and parts[0] == "flyover" and parts[1] in physics \
                        and parts[1] != p:
                    edges[p].add(parts[1])

    def reaches(start, goal, seen=()):
        return any(n == goal or (n not in seen and reaches(n, goal, seen + (n,)))
                   for n in edges[start])
    loops = sorted(p for p in physics if reaches(p, p))
    assert not loops, {p: sorted(edges[p]) for p in loops}


def test_the_package_face_loads_nothing_heavy_until_asked():
    # Every workflow job imports the package; its face must not pull in scipy or pyproj (0.7 s
    # a job before), and every public name must still resolve.
    import subprocess
    import sys
    code = ("import sys, flyover, flyover.model.errors; "
            "print(sorted(m for m in ('scipy', 'pyproj', 'pandas', 'matplotlib') "
            "if m in sys.modules))")
    loaded = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                            check=True).stdout.strip()
    assert loaded == "[]"
    for name in flyover.__all__:
        assert getattr(flyover, name) is not None


def test_the_result_files_reference_is_current():
    # docs/result-files.md is written from the files' own descriptions; a column added to a
    # TableFile without regenerating it fails here.
    from flyover.io.results.steps import describe_all
    written = (PACKAGE.parent / "docs" / "result-files.md").read_text(encoding="utf-8")
    assert written == describe_all(), ("docs/result-files.md is stale: run `python -m "
                                       "flyover.io.results.steps > docs/result-files.md`")
