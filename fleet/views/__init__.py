"""Pages, by area. Each view checks the role's permission, calls a service, renders."""
