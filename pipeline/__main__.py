"""`python -m pipeline` runs the command line."""

from pipeline.cli import main

raise SystemExit(main())
