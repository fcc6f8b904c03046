"""Run the ``shortcut-gym`` command line: ``python -m shortcut_gym``."""

from shortcut_gym.lab.cli import main

raise SystemExit(main())
