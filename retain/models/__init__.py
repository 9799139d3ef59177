"""models stage of retain."""
