"""The study: settings dataclasses, the checked TOML reader and the study's files."""
