"""Screens laid over the main one: help, listening note, questions, prompts, presets."""
