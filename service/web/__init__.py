"""Pages for people: server-rendered HTML with inline SVG charts, no JavaScript needed."""
