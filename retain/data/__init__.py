"""data stage of retain."""
