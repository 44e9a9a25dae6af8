"""``python -m server.cli``: the ``outrigger`` command line."""

from server.cli.main import main

raise SystemExit(main())
