"""Render: findings into text for people (rich) or machines (JSON, JUnit XML, Markdown, HTML)."""
