"""earfold service: command line and (later) the HTTP API and job queue."""
