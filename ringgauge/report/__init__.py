"""Renderers of results: text, JSON, figures and PDF documents. They format; they never compute."""
