"""The fictional demo scenario: the Marrowfen Basin fields written to ``demo-fields/`` (`scenario`)."""
