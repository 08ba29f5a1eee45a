import sys

from flyover.workflow.warm_start import run_warm

# A workflow job's step runs in a fork of the warm process when one serves (warm_start's notes).
status = run_warm(sys.argv[1:])
if status is None:
    from flyover.cli import main
    status = main()
raise SystemExit(status)
