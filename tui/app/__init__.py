"""The Textual app: the application, its screens and widgets, and the run state they read."""
