"""atheris harness: capture_records (see runner.py and targets.check_capture_records)."""

from runner import fuzz

if __name__ == "__main__":
    fuzz("capture_records")
