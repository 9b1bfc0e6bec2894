"""Second floor: reports over a chain, such as the stage table. Imports only the core."""
