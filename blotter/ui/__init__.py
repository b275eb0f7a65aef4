"""The Textual app. Importing this package loads nothing from Textual; ``blotter.ui.app`` does."""
