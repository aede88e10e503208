"""Validation of detections against reference points: matches, precision, recall."""
