"""A campaign: a folder of captures with one catalogue row per (capture, board, run).

    from slipless.campaign import scan, query, export
    scan(Path("bench-week"))              # decodes new or changed captures only
    rows = query(Path("bench-week"), "loss_percent < 1")
    analysis, which = pulses_together(Path("bench-week"), rows)
    export(Path("bench-week"), Path("archive"))
    # one HTML page across the runs: slipless.campaign.report.collect / write

The catalogue is FOLDER/campaign.sqlite (the standard library's sqlite3):
a derived file, rebuilt from the captures at any time.
"""

from slipless.campaign.catalogue import CATALOGUE, COLUMNS, query
from slipless.campaign.export import export
from slipless.campaign.scan import ScanCount, captures_in, scan
from slipless.campaign.together import pulses_together

__all__ = ["CATALOGUE", "COLUMNS", "ScanCount", "captures_in", "export", "pulses_together", "query",
           "scan"]
