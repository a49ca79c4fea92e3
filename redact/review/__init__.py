"""Review before disclosure: what was obscured per frame, re-rendering without the model, the
review page and its server, and the signed review and disclosure records."""
