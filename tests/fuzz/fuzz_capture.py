"""atheris harness: capture (see runner.py and targets.check_capture)."""

from runner import fuzz

if __name__ == "__main__":
    fuzz("capture")
