"""The exact census of all games at one n: the length spectrum by a sweep modulo primes."""
