"""atheris harness: config (see runner.py and targets.check_config)."""

from runner import fuzz

if __name__ == "__main__":
    fuzz("config")
