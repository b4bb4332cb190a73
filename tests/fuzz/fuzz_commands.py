"""atheris harness: commands (see runner.py and targets.check_commands)."""

from runner import fuzz

if __name__ == "__main__":
    fuzz("commands")
