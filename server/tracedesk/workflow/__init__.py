"""Team workflow: tasks and their state machine, review comments, signatures, double digitization, notices."""
