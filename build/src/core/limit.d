build/src/core/limit.o: src/core/limit.c src/core/quadwatch.h
src/core/quadwatch.h:
