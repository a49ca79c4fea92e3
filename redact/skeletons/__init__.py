"""The skeleton rows researchers receive: their format, de-identification, derived packages, exports."""
