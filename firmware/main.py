"""Boot entry: coil off first, then config, then the loop. Runs at every reset."""

import json
import sys


def main():
    import hal

    with open("/profile.json") as f:
        profile = json.load(f)
    hw = hal.BoardHW(profile)  # drives the H-bridge off before anything else
    import bluetooth
    import config
    from board import Board
    from link import Link

    cfg, err = config.load("/config.json", "/config.good.json")
    if err:
        print("slipless: bad config, using the last good one:", err)
    if cfg["mirror"]["enabled"]:
        from mirror import Mirror

        m = cfg["mirror"]
        mirror = Mirror(m["path"], m["max_bytes"], m["flush_every_ms"], hw.ticks_ms())
        hw.on_frame = mirror.write
    else:
        mirror = None
    board = Board(cfg, hw, hw.next_run_id())
    board.config_error = err
    board.mirror = mirror
    board.link = Link(bluetooth.BLE(), bluetooth, cfg["name"], board.ring, board.command_bytes,
                      stack=profile.get("ble"), on_conn_params=board.conn_params)
    hw.start_watchdog(8000)  # a hung loop resets the board, and the reset turns the coil off
    while True:
        try:
            board.poll()
            if mirror is not None:
                mirror.poll(hw.ticks_ms())
        except Exception as exc:  # Board.poll already turned the coil off and ended the run
            sys.print_exception(exc)


main()
