"""Run the ``sonar-guard`` command with ``python -m sonar_guard``."""
import sys

from sonar_guard.cli import main

sys.exit(main())
