"""``python -m nearwise`` runs the command-line interface."""

from nearwise.cli import main

raise SystemExit(main())
