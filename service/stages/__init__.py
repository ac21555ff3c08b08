"""The stages of a flexible-wall test: set-up, saturation, consolidation, permeation, post-test."""
