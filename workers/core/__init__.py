"""Pure numerical functions on numpy arrays. Nothing here does I/O or imports the service."""
