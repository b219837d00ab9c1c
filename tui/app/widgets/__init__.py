"""Widgets the screens compose; they receive data and post messages."""
