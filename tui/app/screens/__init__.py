"""The app's screens: Bench, Plan, Run, Review and dialogs."""
