"""`python -m loopwise`: the command line, as the `loopwise` command."""
from .cli import main

raise SystemExit(main())
