"""atheris harness: btsnoop (see runner.py and targets.check_btsnoop)."""

from runner import fuzz

if __name__ == "__main__":
    fuzz("btsnoop")
