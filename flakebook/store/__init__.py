"""The project file (SQLite): schema, migrations, lock, records and catalogue queries."""
