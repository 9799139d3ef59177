"""publish stage of retain."""
