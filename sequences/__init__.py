"""The recipe language: parse, validate, expand to a flat plan, estimate duration. No hardware."""
