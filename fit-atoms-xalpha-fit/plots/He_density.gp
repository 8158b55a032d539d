# gnuplot script written by stillpoint fit; run from this directory: gnuplot He_density.gp
set datafile separator ','
set key top right autotitle columnhead
set grid
set terminal pngcairo size 900,600 noenhanced font 'sans,11'
set output 'He_density.png.part'
set title "Density of He"
set xlabel 'r (bohr)'
set ylabel '4 pi r^2 n (electrons/bohr)'
set xrange [0:8]
plot '../He_density.csv' using 1:6 with lines lw 2 dt 2 title 'initial', '' using 1:7 with lines lw 2 title 'fitted'
set terminal svg size 900,600 noenhanced font 'sans,11'
set output 'He_density.svg.part'
replot
unset output
