"""Published tables over a range of n: building, reading and verifying them."""
