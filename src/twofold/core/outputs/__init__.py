"""What an analysis leaves behind: session files, report content, exports, predictions, JSON and text."""
