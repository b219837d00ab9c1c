"""What a person sees: the command line, the Textual app, headless progress, reports."""
