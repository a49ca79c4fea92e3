"""Video I/O and the threads that move frames: decode, encode, bounded queues, synthetic test clips."""
