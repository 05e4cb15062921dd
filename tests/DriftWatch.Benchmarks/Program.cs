using System.Globalization;
using System.Text;
using System.Text.Json;
using DriftWatch;
using DriftWatch.Attribution;
using DriftWatch.Benchmarks;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Detection;
using DriftWatch.Hooks;
using DriftWatch.Model;
using DriftWatch.Probing;
using DriftWatch.Storage;
using TorchSharp;
using static TorchSharp.torch;

// DriftWatch's benchmark suite. Every figure is a ratio or a count measured side by side in this one process run.
//   dotnet run --project tests/DriftWatch.Benchmarks -c Release -- [--quick] [--out FOLDER] [--only 1,2,2b,3,4,5,6,7] [--threads N]
bool quick = args.Contains("--quick");
int onlyIndex = Array.IndexOf(args, "--only");
var only = onlyIndex >= 0 && onlyIndex + 1 < args.Length ? args[onlyIndex + 1].Split(',', StringSplitOptions.TrimEntries) : null;
bool Runs(string group) => only is null || only.Contains(group);
int threadsIndex = Array.IndexOf(args, "--threads");
if (threadsIndex >= 0 && threadsIndex + 1 < args.Length)
    torch.set_num_threads(int.Parse(args[threadsIndex + 1], CultureInfo.InvariantCulture));
int outIndex = Array.IndexOf(args, "--out");
string outFolder = outIndex >= 0 && outIndex + 1 < args.Length ? args[outIndex + 1] : "driftwatch-benchmarks";
if (args.Any(a => a is "-h" or "--help"))
{
    Console.WriteLine("Usage: dotnet run --project tests/DriftWatch.Benchmarks -c Release -- [--quick] [--out FOLDER] [--only 1,2,2b,3,4,5,6,7] [--threads N]");
    Console.WriteLine("Measures IG against a bare forward+backward pass, monitor overhead (in line and in the background), evaluations to 1% completeness,");
    Console.WriteLine("store write/read costs, report time and peak memory, and detector cost as history grows; prints a table and writes figures.csv, figures.json and figures.md.");
    return 0;
}
if (args.Length >= 2 && args[0] == "--child-cli")
{
    // Figure 5's child: one CLI command in a fresh process, then its time, peak working set and managed allocation.
    var clock = System.Diagnostics.Stopwatch.StartNew();
    int code = DriftWatch.Cli.CliApp.Run(args[1..], TextWriter.Null, Console.Error);
    double seconds = clock.Elapsed.TotalSeconds;
    using var self = System.Diagnostics.Process.GetCurrentProcess();
    self.Refresh();
    Console.WriteLine(Invariant($"{code} {seconds:R} {self.PeakWorkingSet64} {GC.GetTotalAllocatedBytes(precise: true)}"));
    return 0;
}
Directory.CreateDirectory(outFolder);
int repeats = quick ? 3 : 7;
var figures = new List<Figure>();
string Invariant(FormattableString s) => s.ToString(CultureInfo.InvariantCulture);
void Add(Figure f)
{
    figures.Add(f);
    Console.WriteLine(Invariant($"  [{f.Group}] {f.Name}: {f.Value:G4} {f.Unit}{(f.Target.Length > 0 ? "  (target " + f.Target + ")" : "")}"));
}

Console.WriteLine(Invariant($"DriftWatch benchmarks — {Environment.ProcessorCount} cores, {Environment.OSVersion}, .NET {Environment.Version}, libtorch threads {torch.get_num_threads()}{(quick ? ", quick" : "")}"));
var scenario = ScenarioBuilder.For(GreenhouseVariant.Clean).WithSeed(1).Build();
torch.manual_seed(1);
using var demo = GreenhouseNet.For(scenario);
double rowsPerSecond = Train(demo, scenario, epochs: quick ? 3 : 6);
demo.eval();

// 1. IG throughput against the floor: a bare forward+backward pass over the same expanded rows. First with the C
// library's allocator as it comes, then with freed memory held for reuse (NativeHeap), as the CLI and the demo run.
if (Runs("1"))
{
    Console.WriteLine("1. Integrated Gradients against a bare forward+backward pass (256 rows × 32 steps)");
    using var wide = new WideNet();
    var models = new (string, IWatchedModel, ProbeRows)[]
    {
        ("demo model", demo, scenario.Validation.Rows),
        (Invariant($"wide model ({wide.ParameterCount / 1e6:F2} M parameters)"), wide, RandomRows(WideNet.Inputs, 512)),
    };
    foreach (bool held in new[] { false, true })
    {
        if (held && !NativeHeap.HoldFreedMemory())
            Console.WriteLine("  (this system's allocator does not take the setting: the second pass repeats the first)");
        string heap = held ? "freed memory held" : "allocator as it comes";
        foreach (var (name, model, rows) in models)
        {
            using var scope = torch.NewDisposeScope();
            var features = EncodeRows(model, rows, 256);
            var input = new AttributionInput(f => model.Score(f).squeeze(1), features, torch.zeros(features.shape[1]), AttributionInput.DefaultChunkRows);
            var ig = new IntegratedGradients(32);
            var expanded = features.repeat_interleave(32, 0).detach();
            var frozen = model.Module.parameters().ToList();
            frozen.ForEach(p => p.requires_grad = false);
            // The demo model's IG takes a few milliseconds, where a shared machine's noise is largest: many rounds.
            int igRepeats = model == (IWatchedModel)demo ? (quick ? 100 : 400) : (quick ? 10 : 40);
            void Floor()
            {
                using var inner = torch.NewDisposeScope();
                var leaf = expanded.detach().requires_grad_(true);
                var output = model.Score(leaf).squeeze(1);
                torch.autograd.grad([output.sum()], [leaf]);
            }
            var times = Measure.Paired(igRepeats, () => ig.Attribute(input), Floor);
            Add(new Figure("1", $"IG throughput / floor, {name}, {heap}", times.Ratio, "ratio", "≥ 0.9", Invariant($"median over {igRepeats} rounds of floor / IG; medians IG {times.First * 1000:F2} ms, floor {times.Second * 1000:F2} ms")));

            // Both models open with a linear layer and say so (ILinearEntry), as the monitor then uses it: the path runs
            // in that layer's output, which takes the layer out of the per-step work.
            var entryInput = input with { Entry = LinearEntry.Of(model, AttributionTarget.Logit) };
            entryInput.Entry!.Check(entryInput.Score, features);
            var viaEntry = Measure.Paired(igRepeats, () => ig.Attribute(entryInput), Floor);
            Add(new Figure("1", $"IG through the model's entry layer / floor, {name}, {heap}", viaEntry.Ratio, "ratio", "≥ 0.9", Invariant($"median over {igRepeats} rounds of floor / IG; medians IG {viaEntry.First * 1000:F2} ms, floor {viaEntry.Second * 1000:F2} ms")));
            if (held)
            {
                // IG works in blocks of DefaultChunkRows expanded rows; a floor cut into the same blocks shows what is
                // IG's own overhead and what the blocks themselves save.
                int block = input.ChunkRows / 32 * 32;
                var blocked = Measure.Paired(igRepeats,
                    () => ig.Attribute(input),
                    () =>
                    {
                        for (long start = 0; start < expanded.shape[0]; start += block)
                        {
                            using var inner = torch.NewDisposeScope();
                            var leaf = expanded[TensorIndex.Slice(start, Math.Min(expanded.shape[0], start + block))].detach().requires_grad_(true);
                            var output = model.Score(leaf).squeeze(1);
                            torch.autograd.grad([output.sum()], [leaf]);
                        }
                    });
                Add(new Figure("1", Invariant($"IG throughput / floor cut into IG's {block}-row blocks, {name}"), blocked.Ratio, "ratio", "", Invariant($"median over {igRepeats} rounds; medians IG {blocked.First * 1000:F2} ms, blocked floor {blocked.Second * 1000:F2} ms")));

                // libtorch's intra-op threads: one per core (libtorch's default) against one, switched between alternating calls.
                int threads = torch.get_num_threads(), perCore = Environment.ProcessorCount;
                void AttributeWith(int n)
                {
                    torch.set_num_threads(n);
                    try
                    {
                        ig.Attribute(input);
                    }
                    finally
                    {
                        torch.set_num_threads(threads);
                    }
                }
                var byThreads = Measure.Paired(igRepeats, () => AttributeWith(perCore), () => AttributeWith(1));
                Add(new Figure("1", $"IG time, 1 intra-op thread / {perCore}, {name}", byThreads.Ratio, "ratio", "", Invariant($"median over {igRepeats} rounds; medians {byThreads.Second * 1000:F2} ms against {byThreads.First * 1000:F2} ms")));
            }
            frozen.ForEach(p => p.requires_grad = true);
        }
    }
}

// Every later figure runs with freed memory held, as the CLI and the demo run.
NativeHeap.HoldFreedMemory();

// 2. Monitor overhead at default settings, as training rows and as a share of a 500,000-row epoch.
if (Runs("2"))
{
    Console.WriteLine("2. Monitor overhead at default settings (IG 64 steps, 128 + 128 probe rows, snapshots on)");
    using (var temp = new TempStore())
    {
        // Every setting gets its own monitor; rounds go through all of them in turn so load on a shared machine hits each alike.
        var settings = new (int PerHalf, int Steps)[] { (128, 64), (64, 64), (256, 64), (128, 16), (128, 32) };
        var monitors = settings.Select(s => new TrainingMonitor(new MonitorOptions
        {
            StorePath = temp.Path,
            RunName = Invariant($"overhead-{s.PerHalf}-{s.Steps}"),
            Schema = demo.Schema,
            Probe = ProbeSet.Select(scenario.Validation.Rows, scenario.Training.Rows, s.PerHalf, 1),
            Methods = [new IntegratedGradients(s.Steps)],
            TrainingValueCounts = scenario.TrainingValueCounts,
        })).ToList();
        int epoch = 0;
        var medians = Measure.Interleaved(repeats, [.. monitors.Select<TrainingMonitor, Action>(m => () => m.EndEpoch(demo, epoch++, new EpochMetrics(0.5, 0.5)))]);
        monitors.ForEach(m => m.Dispose());
        double atDefault = medians[0];
        double epochSeconds = 500_000 / rowsPerSecond;
        Add(new Figure("2", "monitor per epoch, equivalent training rows", atDefault * rowsPerSecond, "rows", "", Invariant($"monitor {atDefault * 1000:F0} ms; training {rowsPerSecond:F0} rows/s (Adam, batch 32)")));
        Add(new Figure("2", "monitor / 500,000-row epoch", atDefault / epochSeconds, "ratio", "≤ 0.05", Invariant($"epoch of 500,000 rows ≈ {epochSeconds:F1} s")));
        for (int i = 1; i < settings.Length; i++)
            Add(new Figure("2", Invariant($"monitor, {settings[i].PerHalf} + {settings[i].PerHalf} probe rows, IG {settings[i].Steps} steps / default"), medians[i] / atDefault, "ratio", "", Invariant($"{medians[i] * 1000:F0} ms")));
    }
}

// 2b. Background attribution: wall time per training epoch (train + EndEpoch) with the monitor attributing on a worker
// thread, against attributing in line, against training alone. Steady state: the time between successive EndEpoch returns.
if (Runs("2b"))
{
    Console.WriteLine("2b. Background attribution: wall time per epoch, train + EndEpoch (default settings)");
    foreach (int epochRows in new[] { scenario.Training.Rows.Count, 8_000 })
    {
        using var temp = new TempStore();
        var recipe = GreenhouseNetFactory.RecipeFor(demo, scenario);
        MonitorOptions Options(string name, bool background) => new()
        {
            StorePath = temp.Path,
            RunName = name,
            Schema = demo.Schema,
            Probe = ProbeSet.Select(scenario.Validation.Rows, scenario.Training.Rows, 128, 1),
            TrainingValueCounts = scenario.TrainingValueCounts,
            Model = recipe,
            BackgroundAttribution = background,
        };
        using var inline = new TrainingMonitor(Options(Invariant($"inline-{epochRows}"), false));
        using var background = new TrainingMonitor(Options(Invariant($"background-{epochRows}"), true));
        // A copy of the trained demo model, so the later groups see the same weights as without this one.
        using var copy = GreenhouseNet.For(scenario);
        using (var weights = new MemoryStream())
        {
            demo.save(new BinaryWriter(weights));
            weights.Position = 0;
            copy.load(new BinaryReader(weights));
        }
        using var trainer = new EpochTrainer(copy, scenario.Training.Rows);
        var perEpoch = new[] { new List<double>(), new List<double>(), new List<double>() };
        int blocks = quick ? 3 : 5, blockEpochs = 4, epoch = 0;
        for (int b = 0; b <= blocks; b++)
        {
            for (int mode = 0; mode < 3; mode++)
            {
                var monitor = mode switch { 1 => inline, 2 => background, _ => null };
                var clock = System.Diagnostics.Stopwatch.StartNew();
                double last = 0;
                for (int k = 0; k < blockEpochs; k++)
                {
                    trainer.Train(epochRows);
                    monitor?.EndEpoch(copy, epoch++, new EpochMetrics(0.5, 0.5));
                    double now = clock.Elapsed.TotalSeconds;
                    if (b > 0 && k > 0)
                        perEpoch[mode].Add(now - last); // the first block warms up; the first epoch of a block has nothing to overlap
                    last = now;
                }
                monitor?.WaitForPendingEpoch();
            }
        }
        double trainOnly = Measure.Median(perEpoch[0]), inlineEpoch = Measure.Median(perEpoch[1]), backgroundEpoch = Measure.Median(perEpoch[2]);
        string how = Invariant($"median per epoch: training alone {trainOnly * 1000:F0} ms, attributing in line {inlineEpoch * 1000:F0} ms, in the background {backgroundEpoch * 1000:F0} ms");
        Add(new Figure("2", Invariant($"epoch wall time, background / in line, {epochRows:N0}-row epochs"), backgroundEpoch / inlineEpoch, "ratio", "< 1 pays", how));
        // (The monitor's added time alone, epoch − training, is too small against the training's own spread to divide by.)
    }
}

// 3. Model evaluations to reach IG completeness within 1% on the trained demo model.
if (Runs("3"))
{
    Console.WriteLine("3. Evaluations to 1% completeness (mean |Σ IG − (F(x) − F(x′))| / mean |F(x) − F(x′)|), 256 probe rows");
    using (var scope = torch.NewDisposeScope())
    {
        var features = EncodeRows(demo, scenario.Validation.Rows, 256);
        var input = new AttributionInput(f => demo.Score(f).squeeze(1), features, torch.zeros(features.shape[1]), 8192);
        double RelativeDelta(ColumnAttribution c) => AttributionMap.FromColumns(c, demo.Schema).RelativeMeanDelta() ?? double.NaN;
        long fixed64 = new IntegratedGradients(64).Attribute(input).Evaluations;
        foreach (var rule in Enum.GetValues<QuadratureRule>())
        {
            long? needed = null;
            foreach (int n in new[] { 4, 8, 16, 32, 64, 128, 256, 512 })
            {
                var result = new IntegratedGradients(n, rule).Attribute(input);
                if (RelativeDelta(result) <= 0.01)
                {
                    needed = result.Evaluations;
                    break;
                }
            }
            Add(new Figure("3", $"evaluations to 1%, fixed {rule}", needed ?? double.NaN, "evaluations", "", "smallest power-of-two step count reaching 1%"));
        }
        var adaptive = new AdaptiveIntegratedGradients().Attribute(input);
        Add(new Figure("3", "evaluations to 1%, adaptive", adaptive.Evaluations, "evaluations", "", Invariant($"reached {RelativeDelta(adaptive):P2}")));
        Add(new Figure("3", "adaptive / fixed 64-step Riemann midpoint", (double)adaptive.Evaluations / fixed64, "ratio", "≤ 0.5", "model evaluations, counted"));
    }
}

// 4. Store: one epoch's writes against its attribution; read-back and `show` over a long, wide run.
if (Runs("4") || Runs("5"))
{
    Console.WriteLine("4. Store");
    using (var temp = new TempStore())
    {
        int epochs = 500, features = 200, rows = 256;
        var schema = FeatureSchema.FromDefinitions(Enumerable.Range(0, features).Select(f => new FeatureDefinition($"feature {f}", FeatureKind.Dense, f, 1)));
        var labels = Enumerable.Range(0, rows).Select(r => (float)(r % 2)).ToArray();
        var context = new RunContext(schema, rows / 2, rows / 2, labels, [], new Dictionary<string, IReadOnlyDictionary<long, int>>());
        var detector = new DivergenceDetector(context, GatePolicy.Default);
        var random = new Random(3);
        double writeSeconds = 0;
        using (var store = RunStore.OpenForWriting(temp.Path))
        {
            var run = store.AddRun(new RunDocument
            {
                Name = "wide",
                Features = schema.Features.Select(f => new FeatureDocument { Name = f.Name, Kind = f.Kind.ToString(), FirstColumn = f.FirstColumn, ColumnCount = 1 }).ToList(),
                HeldOutRows = rows / 2,
                TrainingRows = rows / 2,
                ProbeHash = "synthetic benchmark run",
                DenseCount = features,
                ProbeDense = FloatBytes.FromFloats(new float[rows * features]),
                ProbeLabels = FloatBytes.FromFloats(labels),
                Methods = [new MethodDocument { Name = "integrated-gradients", Settings = new() { ["steps"] = "64" } }],
                Target = "logit",
                Baseline = "zero",
                Policy = GatePolicy.Default.ToJson(),
            });
            for (int e = 0; e < epochs; e++)
            {
                var scores = new float[rows * features];
                for (int i = 0; i < scores.Length; i++)
                    scores[i] = (float)(random.NextDouble() * 2 - 1) * (1 + i % features / 50f);
                var map = new AttributionMap(rows, features, scores, new float[rows], new float[rows]);
                var assessment = detector.Observe(new EpochInput(e, new Dictionary<string, double> { [MetricKeys.TrainLoss] = 1.0 / (e + 1), [MetricKeys.ValidationLoss] = 0.5 }, map, []));
                var heldOut = HalfImportance.Compute(map, Enumerable.Range(0, rows / 2).ToArray(), labels);
                var training = HalfImportance.Compute(map, Enumerable.Range(rows / 2, rows / 2).ToArray(), labels);
                writeSeconds += Measure.Once(() => store.InOneTransaction(() =>
                {
                    store.WriteMap(new MapDocument
                    {
                        RunId = run.Id,
                        Epoch = e,
                        Method = "integrated-gradients",
                        Target = "logit",
                        Rows = rows,
                        Features = features,
                        Scores = FloatBytes.FromFloats(scores),
                        Deltas = FloatBytes.FromFloats(map.Deltas),
                        OutputGaps = FloatBytes.FromFloats(map.OutputGaps),
                        HeldOut = ImportanceDocuments.From(heldOut),
                        Training = ImportanceDocuments.From(training),
                    });
                    store.WriteStatistics(new StatisticsDocument { RunId = run.Id, Epoch = e, Statistics = assessment.Statistics });
                    store.WriteVerdict(VerdictDocuments.ToDocument(assessment.Verdict, run.Id));
                    store.WriteEpoch(new EpochDocument { RunId = run.Id, Epoch = e, Metrics = new() { [MetricKeys.TrainLoss] = 1.0 / (e + 1), [MetricKeys.ValidationLoss] = 0.5 } });
                }));
            }
        }
        double perEpochWrite = writeSeconds / epochs;
        double attribution;
        using (var scope = torch.NewDisposeScope())
        {
            var features256 = EncodeRows(demo, scenario.Validation.Rows, 256);
            // As the monitor attributes: default blocks, through the demo model's declared entry layer.
            var input = AttributionInput.ForModel(demo, AttributionTarget.Logit, features256, torch.zeros(features256.shape[1]), AttributionInput.DefaultChunkRows, demo.Schema);
            attribution = Measure.Interleaved(repeats, () => new IntegratedGradients(64).Attribute(input))[0];
        }
        Add(new Figure("4", Invariant($"store write per epoch, 256 × {features} map with statistics, verdict, epoch"), perEpochWrite, "s", "", "one transaction each"));
        Add(new Figure("4", "store write / IG attribution, demo-model epoch", DemoEpochWrite(demo, scenario, repeats) / attribution, "ratio", "well under 1", Invariant($"IG 64 steps over 256 rows on the demo model: {attribution * 1000:F1} ms")));
        var readAndShow = Measure.Interleaved(
            quick ? 1 : 3,
            () =>
            {
                using var store = RunStore.OpenForReading(temp.Path);
                var run = store.GetRun("wide");
                _ = store.Maps(run.Id).Count;
            },
            () => DriftWatch.Cli.CliApp.Run(["show", "wide", "--store", temp.Path], TextWriter.Null, TextWriter.Null));
        Add(new Figure("4", Invariant($"read back {epochs} epochs × {features} features"), readAndShow[0], "s", "seconds", "every map document, median"));
        Add(new Figure("4", Invariant($"driftwatch show over {epochs} epochs × {features} features"), readAndShow[1], "s", "seconds", "in process, median"));

        if (Runs("5"))
        {
            // 5. The report over the same run, in a child process so its peak working set is its own.
            Console.WriteLine("5. Report");
            string reportFolder = System.IO.Path.Combine(System.IO.Path.GetDirectoryName(temp.Path)!, "report");
            var reports = Enumerable.Range(0, quick ? 1 : 3).Select(_ => RunChild("report", "wide", "--store", temp.Path, "--out", reportFolder)).ToList();
            var listing = RunChild("runs", "--store", temp.Path);
            var report = reports.OrderBy(r => r.Seconds).ElementAt(reports.Count / 2);
            long peak = reports.Max(r => r.PeakBytes);
            Add(new Figure("5", Invariant($"driftwatch report over {epochs} epochs × {features} features"), report.Seconds, "s", "seconds", Invariant($"median of {reports.Count} child processes, command time in process (startup excluded); HTML + Markdown + charts")));
            Add(new Figure("5", "report, peak working set of its process", peak / 1e6, "MB", "", Invariant($"Process.PeakWorkingSet64 (VmHWM) of the child; 'driftwatch runs' in the same kind of child peaks at {listing.PeakBytes / 1e6:F0} MB")));
            Add(new Figure("5", "report, managed bytes allocated", report.AllocatedBytes / 1e6, "MB", "", "GC.GetTotalAllocatedBytes in the child (all allocations, not live memory)"));
        }
        Add(new Figure("4", "store size per epoch", new FileInfo(temp.Path).Length / (double)epochs, "bytes", "", Invariant($"{rows} rows × {features} features, float32 scores")));
    }
}

// 6. Detector cost per epoch as the history grows (must stay flat: incremental, not quadratic).
if (Runs("6"))
{
    Console.WriteLine("6. Detector per epoch as history grows");
    {
        int epochs = quick ? 100 : 1000, features = quick ? 200 : 1000, rows = 256;
        var schema = FeatureSchema.FromDefinitions(Enumerable.Range(0, features).Select(f => new FeatureDefinition($"f{f}", FeatureKind.Dense, f, 1)));
        var labels = Enumerable.Range(0, rows).Select(r => (float)(r % 2)).ToArray();
        var detector = new DivergenceDetector(new RunContext(schema, rows / 2, rows / 2, labels, [], new Dictionary<string, IReadOnlyDictionary<long, int>>()), GatePolicy.Default);
        var random = new Random(5);
        var scores = new float[rows * features];
        var times = new double[epochs];
        for (int e = 0; e < epochs; e++)
        {
            for (int i = 0; i < scores.Length; i++)
                scores[i] = (float)(random.NextDouble() * 2 - 1);
            var map = new AttributionMap(rows, features, (float[])scores.Clone(), null, null);
            times[e] = Measure.Once(() => detector.Observe(new EpochInput(e, new Dictionary<string, double> { [MetricKeys.ValidationLoss] = 0.5 }, map, [])));
        }
        int window = Math.Max(5, epochs / 10);
        double early = Measure.Median(times.Skip(1).Take(window).ToArray());
        double late = Measure.Median(times.Skip(epochs - window).ToArray());
        Add(new Figure("6", Invariant($"detector per epoch, {features} features, epoch {epochs}"), late, "s", "", "median of the last tenth"));
        Add(new Figure("6", Invariant($"detector late / early epochs ({epochs} epochs)"), late / early, "ratio", "≈ 1 (flat)", "median of last tenth over median of first tenth"));
    }
}

// 7. The split-consistency check ProbeSet.Select runs over every row it is given: 100,000 rows, 20 raw inputs.
if (Runs("7"))
{
    Console.WriteLine("7. Split-consistency check in ProbeSet.Select");
    {
        int total = quick ? 20_000 : 100_000, dense = 10, categorical = 10;
        var random = new Random(11);
        ProbeRows Side(int rows)
        {
            var d = new float[rows * dense];
            var c = new long[rows * categorical];
            var l = new float[rows];
            for (int r = 0; r < rows; r++)
            {
                for (int i = 0; i < dense; i++)
                    d[r * dense + i] = (float)random.NextDouble();
                for (int i = 0; i < categorical; i++)
                    c[r * categorical + i] = random.Next(i % 2 == 0 ? 12 : 400);
                l[r] = d[r * dense] + 0.1 * c[r * categorical] + random.NextDouble() > 1.1 ? 1 : 0;
            }
            return new ProbeRows(d, dense, c, categorical, l);
        }
        var training = Side(total * 4 / 5);
        var heldOut = Side(total / 5);
        var plain = Measure.Median(Enumerable.Range(0, 3).Select(_ => Measure.Once(() => new ProbeSet(heldOut.Take([.. Enumerable.Range(0, 128)]), training.Take([.. Enumerable.Range(0, 128)])))).ToArray());
        var cpuBefore = System.Diagnostics.Process.GetCurrentProcess().TotalProcessorTime;
        var times = Enumerable.Range(0, 3).Select(_ => Measure.Once(() => ProbeSet.Select(heldOut, training, 128, 1))).ToArray();
        double cpu = (System.Diagnostics.Process.GetCurrentProcess().TotalProcessorTime - cpuBefore).TotalSeconds / 3;
        var check = ProbeSet.Select(heldOut, training, 128, 1).SplitCheck!;
        Add(new Figure("7", Invariant($"ProbeSet.Select with the split check, {total:N0} rows × {dense + categorical} inputs"), Measure.Median(times), "s", "well under 1 s",
            Invariant($"median of 3; {check.TrainingRowsUsed:N0} + {check.HeldOutRowsUsed:N0} rows used, B = {check.Permutations}, {Environment.ProcessorCount} cores, {cpu:F2} s of processor time per call, load average {LoadAverage()}; building the probe alone {plain * 1000:F1} ms")));
        static string LoadAverage() => File.Exists("/proc/loadavg") ? File.ReadAllText("/proc/loadavg").Split(' ')[0] : "unknown";
    }
}

// Table and files.
var table = new StringBuilder();
table.AppendLine("| # | figure | value | unit | target | how |");
table.AppendLine("|---|---|---|---|---|---|");
foreach (var f in figures)
    table.AppendLine(Invariant($"| {f.Group} | {f.Name} | {f.Value:G4} | {f.Unit} | {f.Target} | {f.Note} |"));
Console.WriteLine();
Console.WriteLine(table);
var csv = new StringBuilder("group,name,value,unit,target,note\n");
foreach (var f in figures)
    csv.AppendLine(string.Join(",", new[] { f.Group, f.Name, f.Value.ToString("R", CultureInfo.InvariantCulture), f.Unit, f.Target, f.Note }.Select(Quote)));
File.WriteAllText(Path.Combine(outFolder, "figures.csv"), csv.ToString());
File.WriteAllText(Path.Combine(outFolder, "figures.json"), JsonSerializer.Serialize(figures, new JsonSerializerOptions { WriteIndented = true, NumberHandling = System.Text.Json.Serialization.JsonNumberHandling.AllowNamedFloatingPointLiterals }));
File.WriteAllText(Path.Combine(outFolder, "figures.md"), table.ToString());
Console.WriteLine($"wrote {Path.Combine(outFolder, "figures.csv")}, figures.json and figures.md");
return 0;

// Seconds to store one demo-model epoch as the monitor does (maps 256 × 13, snapshot, statistics, verdict, epoch), median.
static double DemoEpochWrite(GreenhouseNet model, GreenhouseScenario scenario, int repeats)
{
    using var temp = new TempStore();
    int runId;
    using (var monitor = new TrainingMonitor(new MonitorOptions
    {
        StorePath = temp.Path,
        RunName = "write",
        Schema = model.Schema,
        Probe = ProbeSet.Select(scenario.Validation.Rows, scenario.Training.Rows, 128, 1),
        Methods = [new IntegratedGradients(64)],
    }))
    {
        monitor.EndEpoch(model, 0, new EpochMetrics(0.5, 0.5));
        runId = monitor.Run.Id;
    }
    // The monitor keeps its store to itself: the same writes go through a store opened on its file.
    using var store = RunStore.OpenForWriting(temp.Path);
    var stored = store.Maps(runId)[0];
    var statistics = store.StatisticsOf(runId)[0];
    var verdict = store.Verdicts(runId)[0];
    var epochDocument = store.Epochs(runId)[0];
    using var weights = store.ReadSnapshot(epochDocument.SnapshotId!);
    var bytes = weights.ToArray();
    int epoch = 1;
    return Measure.Interleaved(repeats, () =>
    {
        int e = epoch++;
        store.InOneTransaction(() =>
        {
            store.WriteMap(stored with { Id = 0, Epoch = e });
            using var snapshot = new MemoryStream(bytes);
            store.SaveSnapshot(runId, e, snapshot);
            store.WriteStatistics(statistics with { Id = 0, Epoch = e });
            store.WriteVerdict(verdict with { Id = 0, Epoch = e });
            store.WriteEpoch(epochDocument with { Id = 0, Epoch = e });
        });
    })[0];
}

// Runs one CLI command in a child copy of this program (--child-cli) and reads its time, peak working set and allocation.
static (double Seconds, long PeakBytes, long AllocatedBytes) RunChild(params string[] command)
{
    string host = Environment.ProcessPath ?? "dotnet";
    var start = new System.Diagnostics.ProcessStartInfo(host) { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
    if (Path.GetFileNameWithoutExtension(host) == "dotnet")
        start.ArgumentList.Add(typeof(Figure).Assembly.Location);
    start.ArgumentList.Add("--child-cli");
    foreach (string a in command)
        start.ArgumentList.Add(a);
    using var child = System.Diagnostics.Process.Start(start) ?? throw new InvalidOperationException("could not start the child process");
    var error = child.StandardError.ReadToEndAsync();
    string output = child.StandardOutput.ReadToEnd();
    child.WaitForExit();
    var fields = output.Trim().Split('\n')[^1].Split(' ');
    if (child.ExitCode != 0 || fields.Length != 4 || fields[0] != "0")
        throw new InvalidOperationException($"child '{string.Join(' ', command)}' failed: {output} {error.Result}");
    return (double.Parse(fields[1], CultureInfo.InvariantCulture), long.Parse(fields[2], CultureInfo.InvariantCulture), long.Parse(fields[3], CultureInfo.InvariantCulture));
}

static string Quote(string value) => value.IndexOfAny([',', '"', '\n']) >= 0 ? "\"" + value.Replace("\"", "\"\"", StringComparison.Ordinal) + "\"" : value;

static ProbeRows RandomRows(int dense, int rows)
{
    var random = new Random(9);
    return new ProbeRows(Enumerable.Range(0, rows * dense).Select(_ => (float)(random.NextDouble() * 2 - 1)).ToArray(), dense, [], 0, null);
}

static Tensor EncodeRows(IWatchedModel model, ProbeRows rows, int count)
{
    using var noGrad = torch.no_grad();
    var dense = torch.tensor(rows.Dense, [rows.Count, rows.DenseCount])[..count];
    var cats = torch.tensor(rows.Categorical, [rows.Count, rows.CategoricalCount])[..count];
    return model.Encode(dense, cats).detach();
}

// Trains the demo model for a few epochs (so benchmarks see trained weights) and returns training rows per second.
static double Train(GreenhouseNet model, GreenhouseScenario scenario, int epochs)
{
    var rows = scenario.Training.Rows;
    using var dense = torch.tensor(rows.Dense, [rows.Count, rows.DenseCount]);
    using var cats = torch.tensor(rows.Categorical, [rows.Count, rows.CategoricalCount]);
    using var labels = torch.tensor(rows.Labels!);
    using var optimizer = new DriftWatch.Hooks.Optimizers.Adam(model.parameters(), 1e-3);
    var seconds = new List<double>();
    for (int e = 0; e < epochs; e++)
    {
        model.train();
        seconds.Add(Measure.Once(() =>
        {
            for (int start = 0; start < rows.Count; start += 32)
            {
                using var scope = torch.NewDisposeScope();
                long end = Math.Min(rows.Count, start + 32);
                var loss = nn.functional.binary_cross_entropy_with_logits(model.call(dense[start..(int)end], cats[start..(int)end]).squeeze(1), labels[start..(int)end]);
                optimizer.zero_grad();
                loss.backward();
                optimizer.step();
            }
        }));
    }
    return rows.Count / Measure.Median(seconds.Skip(1).ToArray());
}

/// <summary>Trains the demo model with Adam, batch 32, over a given number of rows per epoch (cycling through the training set).</summary>
internal sealed class EpochTrainer : IDisposable
{
    private readonly GreenhouseNet _model;
    private readonly Tensor _dense, _categorical, _labels;
    private readonly optim.Optimizer _optimizer;
    private int _next;

    public EpochTrainer(GreenhouseNet model, ProbeRows rows)
    {
        _model = model;
        _dense = torch.tensor(rows.Dense, [rows.Count, rows.DenseCount]);
        _categorical = torch.tensor(rows.Categorical, [rows.Count, rows.CategoricalCount]);
        _labels = torch.tensor(rows.Labels!);
        _optimizer = torch.optim.Adam(model.parameters(), 1e-4);
    }

    public void Train(int rows)
    {
        _model.train();
        long count = _dense.shape[0];
        for (int done = 0; done < rows; done += 32)
        {
            using var scope = torch.NewDisposeScope();
            long start = _next, end = Math.Min(count, start + 32);
            _next = end == count ? 0 : (int)end;
            var batch = TensorIndex.Slice(start, end);
            var loss = nn.functional.binary_cross_entropy_with_logits(_model.call(_dense[batch], _categorical[batch]).squeeze(1), _labels[batch]);
            _optimizer.zero_grad();
            loss.backward();
            _optimizer.step();
        }
        _model.eval();
    }

    public void Dispose()
    {
        _optimizer.Dispose();
        _dense.Dispose();
        _categorical.Dispose();
        _labels.Dispose();
    }
}

/// <summary>A store file in a temporary folder, deleted at dispose.</summary>
internal sealed class TempStore : IDisposable
{
    private readonly string _folder = System.IO.Path.Combine(System.IO.Path.GetTempPath(), "driftwatch-bench-" + Guid.NewGuid().ToString("N")[..10]);

    public TempStore() => Directory.CreateDirectory(_folder);

    public string Path => System.IO.Path.Combine(_folder, "store.litedb");

    public void Dispose()
    {
        try
        {
            Directory.Delete(_folder, recursive: true);
        }
        catch (IOException)
        {
        }
    }
}
