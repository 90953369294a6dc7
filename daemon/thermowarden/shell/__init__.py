"""The shell: MQTT, scheduler, SQLite store, signals, logging."""
