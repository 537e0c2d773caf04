"""Design: space-filling plans, augmentation, adaptive and nested next runs."""
