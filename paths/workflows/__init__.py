"""workflows layer of paths (see DEVELOPERS.md, architecture map)."""
