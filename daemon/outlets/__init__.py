"""The way out: MQTT with its persistent outbox, the passage recording, the JSONL file,
exports, the embedded demo broker and the service manager's notifications."""
