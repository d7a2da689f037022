"""spanwright service: the Flask API, the command line and their adapters over the core."""
