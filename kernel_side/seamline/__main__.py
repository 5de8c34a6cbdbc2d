"""``python -m seamline ...``: the command line (see ``seamline.cli``)."""
from .cli import main

raise SystemExit(main())
