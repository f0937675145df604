"""``python -m tracer``: the command line."""

from tracer.cli import main

raise SystemExit(main())
