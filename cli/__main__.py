"""`python -m halo.cli` runs the command line (as the `halo` command does)."""

from halo.cli.app import main

raise SystemExit(main())
