"""atheris harness: decoder (see runner.py and targets.check_decoder)."""

from runner import fuzz

if __name__ == "__main__":
    fuzz("decoder")
