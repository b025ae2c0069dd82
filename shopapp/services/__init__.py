"""Use-cases. Each takes a session and the acting user, flushes, writes its audit
event, and leaves the single commit to the caller (request or CLI command)."""
