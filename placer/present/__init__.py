"""What people read: text and JSON reports, pictures and the lesson page."""
