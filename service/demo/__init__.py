"""The invented demo scenario: Touchstone files of an LNA and a combined power stage."""
