"""Records of the decision register."""
