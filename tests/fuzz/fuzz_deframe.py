"""atheris harness: deframe (see runner.py and targets.check_deframe)."""

from runner import fuzz

if __name__ == "__main__":
    fuzz("deframe")
