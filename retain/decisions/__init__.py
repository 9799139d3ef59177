"""decisions stage of retain."""
