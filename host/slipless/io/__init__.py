"""Files in and tables out: captures, btsnoop logs, the inputs a user names, table writers and readers."""
