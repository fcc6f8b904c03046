"""Trial logs: schema, validation, reading and writing, per-participant views."""
