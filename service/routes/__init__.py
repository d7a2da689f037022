"""HTTP routes: one blueprint per resource, all thin adapters over store and queue
(reached through :mod:`service.services`)."""
