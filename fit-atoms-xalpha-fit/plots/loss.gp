# gnuplot script written by stillpoint fit; run from this directory: gnuplot loss.gp
set datafile separator ','
set key top right autotitle columnhead
set grid
set terminal pngcairo size 900,600 noenhanced font 'sans,11'
set output 'loss.png.part'
set title 'Loss history'
set xlabel 'iteration'
set ylabel 'loss (dimensionless loss units)'
set logscale y
plot '../history.csv' using 1:2 every ::0 with linespoints lw 2 title 'training loss'
set terminal svg size 900,600 noenhanced font 'sans,11'
set output 'loss.svg.part'
replot
unset output
