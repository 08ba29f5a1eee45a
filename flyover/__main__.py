from flyover.cli import main

raise SystemExit(main())
