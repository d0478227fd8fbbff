"""``python -m ethoscribe`` runs the command line."""

from ethoscribe.cli import main

raise SystemExit(main())
