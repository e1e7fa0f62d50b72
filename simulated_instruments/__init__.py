"""A simulated bench: SCPI instruments on loopback sockets, driven by the physics of what
is connected. Reached only over TCP, exactly as a LAN instrument is."""
