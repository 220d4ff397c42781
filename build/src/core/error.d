build/src/core/error.o: src/core/error.c src/core/quadwatch.h
src/core/quadwatch.h:
