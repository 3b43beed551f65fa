"""Allow `python -m runner` as a synonym of the `stepmeter` command."""

from runner.cli import main

raise SystemExit(main())
