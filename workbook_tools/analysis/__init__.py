"""Pure analysis engine: numpy and scipy only, nothing that knows about spreadsheets."""
