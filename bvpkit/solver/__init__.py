"""The solve driver: options, the first iterate, the selector, homotopy, settling a Solution."""
