"""Recording a run over BLE: the recorder, board control, keys, and the laptop's links (transports/)."""
