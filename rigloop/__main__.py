"""python -m rigloop -> cli.main()."""

from .cli import main

raise SystemExit(main())
