using Bitbudget.Benchmarks;

// Side-by-side measurements of what a search costs; see DEVELOPERS.md ("Benchmarks") for how to read them.
// usage: dotnet run -c Release --project tests/Benchmarks -- [--ocr DIR] [--demo DIR] [--samples N] [--repeat N] [--rounding] [--pairwise [--pairs 8,16] [--model det] [--data PAGES_DIR]] [--only knapsack]
//        or: -- --sweep MODEL.onnx [--samples N] [--size HxW] [--bits 2,4,8] [--repeat N]   (one model's whole sweep, own process)
return BenchmarkRun.Run(args);
