"""The board outside a run: flashing, the data-rate budget, where the board's files are."""
