"""The published site: page model -> Markdown + SVG -> MkDocs."""
