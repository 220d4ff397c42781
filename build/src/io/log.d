build/src/io/log.o: src/io/log.c src/io/log.h
src/io/log.h:
