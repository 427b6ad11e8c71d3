"""Built-in example specs (scenarios of our own with invented data) for ``retol demo``."""
