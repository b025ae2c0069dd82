"""Certificates: register, issue, reissue, void, downloads and the public verification page."""
