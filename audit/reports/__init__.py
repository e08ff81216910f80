"""Stage 6, reports: JSON shapes, text, HTML, JUnit and Markdown, trade units, the one output rule."""
