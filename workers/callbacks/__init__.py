"""Batch callbacks: where they may go (``targets``), how they are signed (``signing``, the open
Standard Webhooks scheme) and the sender that delivers them at least once (``sender``)."""
