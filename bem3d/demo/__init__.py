"""The shipped demos, scenarios of our own design: a proximity-sensor head (sensor_head) and a
two-key touch keypad on a real stack-up (keypad)."""
