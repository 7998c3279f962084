"""The expression language, the frozen Problem, limits on numbers and symbolic work, options."""
