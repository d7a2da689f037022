"""spanwright workers: the pure planning core (``workers.planning``) and the queue adapter."""
