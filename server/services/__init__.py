"""Use cases that touch the database. Each commits in one place and records an audit event."""
