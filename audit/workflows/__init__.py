"""Workflows: claims manifests, git-base comparison, stress campaigns and their random-system strategies."""
