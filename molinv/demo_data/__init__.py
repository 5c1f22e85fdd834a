"""The demo scenario (see README.md here): package data, so ``molinv demo`` finds it in an installed wheel too."""
