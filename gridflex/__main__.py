"""``python -m gridflex`` runs the command line."""

from .cli.main import main

raise SystemExit(main())
