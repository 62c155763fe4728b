"""The store: tables, the library API over them, migrations, the write lock."""
