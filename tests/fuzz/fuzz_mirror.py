"""atheris harness: mirror (see runner.py and targets.check_mirror)."""

from runner import fuzz

if __name__ == "__main__":
    fuzz("mirror")
