"""What a report says: content, tables and methods text (no Qt)."""
