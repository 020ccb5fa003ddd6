"""Per-trial physiology: pupil, cardiac and EEG measures from an aligned recording (issue 12)."""
