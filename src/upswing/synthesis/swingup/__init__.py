"""Swing-up from hanging to the balance controller: energy-based laws, trajectory tracking and the hand-over."""
