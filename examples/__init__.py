"""Demo scenarios and data of an invented lab, shipped so `trapbudget demo` works anywhere."""
