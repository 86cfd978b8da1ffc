"""A measurement run: the session, the shared stages, the step generators and the engine, journal and run folder."""
