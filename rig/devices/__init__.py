"""The bench's devices: protocols, the pattern window, cameras, serial instrument and accessories, clock."""
