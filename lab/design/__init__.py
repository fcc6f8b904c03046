"""Interface design questions answered with the yardstick planner: which commands get hotkeys."""
