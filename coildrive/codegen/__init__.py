"""C code generation from Jinja2 templates in ``codegen_templates/``.

Generators are pure functions (model in, text out); only the CLI writes files.
"""
