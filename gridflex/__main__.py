"""``python -m gridflex`` runs the command line."""

from gridflex.cli.main import main

raise SystemExit(main())
