"""Second floor: deciding the next stage (audition, grow, reference models). Imports only the core."""
