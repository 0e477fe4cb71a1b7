"""Editor support: the formatter, the highlighting lexer, the symbol index and the language server.

Nothing here changes what a program means: every feature reads the same syntax
tree and the same checker results as ``seqlang check``.
"""
