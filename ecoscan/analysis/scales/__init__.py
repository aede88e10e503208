"""Multi-scale pattern: K, L, g, G, F and J with simulation envelopes and global tests."""
