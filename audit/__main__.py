"""``python -m audit`` runs the fitaudit command line."""
import sys

from .cli import main

sys.exit(main())
