build/src/io/num.o: src/io/num.c src/io/num.h src/core/quadwatch.h
src/io/num.h:
src/core/quadwatch.h:
