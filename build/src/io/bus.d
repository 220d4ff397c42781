build/src/io/bus.o: src/io/bus.c src/io/bus.h src/io/config.h \
 src/core/quadwatch.h
src/io/bus.h:
src/io/config.h:
src/core/quadwatch.h:
