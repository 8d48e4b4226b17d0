"""Operations on a whole archive: backup and restore, moving from SQLite to PostgreSQL, the orphan sweep."""
