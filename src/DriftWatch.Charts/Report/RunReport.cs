using System.Globalization;
using System.Security.Cryptography;
using System.Text;
using DriftWatch.Detection;
using DriftWatch.Storage;

namespace DriftWatch.Charts.Report;

/// <summary>What a report contains and where it goes.</summary>
/// <remarks>Every setting is checked when it is set (<c>new</c> or <c>with</c>); a bad one throws at once.</remarks>
public sealed record ReportOptions
{
    /// <summary>The attribution method whose maps to read. Default <see cref="RunHistory.DefaultMethod"/>.</summary>
    /// <exception cref="DriftWatchException">Empty.</exception>
    public string Method
    {
        get;
        init => field = !string.IsNullOrWhiteSpace(value) ? value
            : throw new DriftWatchException($"report Method is empty; name an attribution method such as '{RunHistory.DefaultMethod}' or leave it out");
    } = RunHistory.DefaultMethod;

    /// <summary>The charts to include, in order, after the findings (each finding has its own evidence chart beside it). Default: every kind but <see cref="ChartKind.Evidence"/>.</summary>
    /// <exception cref="DriftWatchException">Null, or a kind that is not one of <see cref="ChartCatalog.All"/>.</exception>
    public IReadOnlyList<ChartKind> Charts
    {
        get;
        init => field = value is not null && value.All(ChartCatalog.All.Contains) ? value
            : throw new DriftWatchException($"report Charts must hold kinds among {string.Join(", ", ChartCatalog.All.Select(ChartCatalog.Spelling))} (or none); got {(value is null ? "null" : string.Join(", ", value.Select(k => (int)k)))}");
    } = [.. ChartCatalog.All.Where(k => k != ChartKind.Evidence)];

    /// <summary>The most findings shown beside their own evidence chart (the most severe first); the findings table lists them all. Default 8.</summary>
    /// <exception cref="DriftWatchException">Negative.</exception>
    public int EvidenceCharts
    {
        get;
        init => field = value >= 0 ? value : throw new DriftWatchException($"report EvidenceCharts must be 0 or more; got {value}");
    } = 8;

    /// <summary>What the charts draw.</summary>
    /// <exception cref="DriftWatchException">Null.</exception>
    public ChartOptions Choices { get; init => field = value ?? throw new DriftWatchException("report Choices is null; leave it out for the default choices"); } = new();

    /// <summary>The charts' size. Default <see cref="ChartSize.Default"/>.</summary>
    /// <exception cref="DriftWatchException">A side outside <see cref="ChartSize.MinimumSide"/>..<see cref="ChartSize.MaximumSide"/> (e.g. <c>default</c>).</exception>
    public ChartSize Size { get; init => field = new ChartSize(value.Width, value.Height); } = ChartSize.Default;

    /// <summary>The report's time stamp, from an injected clock in tests. Default: now.</summary>
    /// <exception cref="DriftWatchException">Null.</exception>
    public TimeProvider Clock { get; init => field = value ?? throw new DriftWatchException("report Clock is null; leave it out for the system clock"); } = TimeProvider.System;
}

/// <summary>The files a report wrote.</summary>
/// <param name="Html">The self-contained HTML file.</param>
/// <param name="Markdown">The Markdown summary, which links to the PNGs.</param>
/// <param name="Charts">The chart PNGs, in a folder beside the two: the findings' evidence charts first, then the charts asked for.</param>
public sealed record ReportFiles(string Html, string Markdown, IReadOnlyList<string> Charts);

/// <summary>
/// The morning-after report of one run: one self-contained HTML file (charts embedded as PNG data, no script, font or
/// picture fetched from anywhere) and a Markdown summary beside it, with the run's header, its verdict timeline, a table of
/// findings with their evidence and epochs, the charts, and the caution that attributions describe the model, not causes.
/// </summary>
public static class RunReport
{
    /// <summary>The caution every report carries.</summary>
    public const string Caution =
        "Attributions describe the model, not causes in the world: a large share means the model's output is sensitive to that "
        + "feature along the attribution path, not that the feature causes the outcome. A finding, a Caution or a Halt is advice "
        + "to a person, not proof; read the evidence before acting on it.";

    // Writes the page's own check into the page: how many images decoded, and any error the page raised.
    // A content security policy allows this script by its hash and nothing else.
    private const string PageCheckScript =
        "var driftwatchErrors=[];"
        + "window.addEventListener('error',function(e){driftwatchErrors.push(String(e.message||(e.target&&e.target.tagName)||'error'));},true);"
        + "window.addEventListener('load',function(){var images=document.images,decoded=0;"
        + "for(var i=0;i<images.length;i++){if(images[i].complete&&images[i].naturalWidth>0){decoded++;}}"
        + "var check=document.getElementById('page-check');check.setAttribute('data-images',String(images.length));"
        + "check.setAttribute('data-decoded',String(decoded));check.setAttribute('data-errors',driftwatchErrors.join(' | '));"
        + "check.textContent='Page check: '+decoded+' of '+images.length+' charts decoded'+(driftwatchErrors.length?'; errors: '+driftwatchErrors.join(' | '):'; no errors')+'.';});";

    /// <summary>Writes the report of <paramref name="runName"/> into <paramref name="folder"/>.</summary>
    /// <param name="store">An open store.</param>
    /// <param name="runName">The run.</param>
    /// <param name="folder">The output folder; created when missing. Charts go to its <c>charts</c> subfolder.</param>
    /// <param name="options">What to include.</param>
    /// <param name="progress">Called with a description before each step; may be null.</param>
    /// <exception cref="DriftWatchException">No such run or method, no complete epoch, or a file cannot be written.</exception>
    public static ReportFiles Write(RunStore store, string runName, string folder, ReportOptions options, Action<string>? progress = null)
    {
        ArgumentNullException.ThrowIfNull(store);
        ArgumentNullException.ThrowIfNull(runName);
        ArgumentNullException.ThrowIfNull(folder);
        ArgumentNullException.ThrowIfNull(options);
        progress?.Invoke("reading the run");
        // The feature chart's default feature is a flagged one: its per-row attributions come with the one read of the maps.
        var history = RunHistory.Load(store, runName, options.Method, rowsOfFlagged: true);
        ChartKit.RequireEpochs(history);
        string chartFolder = Path.Combine(folder, "charts");
        var charts = ChartCatalog.RenderAll(store, history, options.Charts, options.Choices, chartFolder, options.Size, k => progress?.Invoke($"{ChartCatalog.Spelling(k)} chart"));

        var findings = RunFindings.Summarise(history);
        var evidence = EvidenceOf(history, findings, options, chartFolder, progress);

        progress?.Invoke("writing the report");
        var trust = RunTrust.Load(store, history);
        var now = options.Clock.GetUtcNow();
        string stem = ChartFiles.SafePart(history.RunName) + "-report";
        string html = Path.Combine(folder, stem + ".html");
        string markdown = Path.Combine(folder, stem + ".md");
        try
        {
            Directory.CreateDirectory(folder);
            OutputFile.WriteText(html, Html(history, findings, evidence, trust, charts, store.Path, now));
            OutputFile.WriteText(markdown, Markdown(history, findings, evidence, trust, charts, folder, store.Path, now));
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            throw new DriftWatchException($"cannot write the report to '{DisplayText.Clean(folder)}': {e.Message}", e);
        }
        return new ReportFiles(html, markdown, [.. evidence.Select(e => e.Path), .. charts.Select(c => c.Path)]);
    }

    // Each finding of the verdict's method (most severe first, as the table lists them) with its own evidence chart.
    private static List<(FindingSummary Finding, string Path)> EvidenceOf(RunHistory history, IReadOnlyList<FindingSummary> findings, ReportOptions options, string chartFolder, Action<string>? progress)
    {
        var shown = new List<(FindingSummary, string)>();
        foreach (var finding in findings.Where(f => f.SeenOnlyBy.IsEmpty && EvidencePlans.For(f.Kind) is not null && history.Method == history.PrimaryMethod).Take(options.EvidenceCharts))
        {
            var plan = EvidencePlans.For(finding.Kind)!;
            string? feature = plan.NamesFeature && finding.Feature.Length > 0 ? finding.Feature : null;
            if (plan.NamesFeature && (feature is null || history.FeatureIndex(feature) < 0))
                continue;
            progress?.Invoke($"evidence chart of {RunFindings.Describe(finding.Kind)}");
            var chart = new EvidenceChart(finding.Kind, feature);
            string name = feature is null ? chart.Name : $"{chart.Name}-{feature}";
            string path = Path.Combine(chartFolder, ChartFiles.FileName(history.RunName, name, history.Method));
            try
            {
                Directory.CreateDirectory(chartFolder);
                chart.Render(history, path, options.Size);
            }
            catch (Exception e) when (e is IOException or UnauthorizedAccessException)
            {
                throw new DriftWatchException($"cannot write the chart to '{DisplayText.Clean(path)}': {e.Message}", e);
            }
            shown.Add((finding, path));
        }
        return shown;
    }

    private static string EvidenceCaption(FindingSummary finding) =>
        $"{finding.Severity}: {RunFindings.Describe(finding)}{(finding.Feature.Length == 0 ? "" : $" of “{DisplayText.Clean(finding.Feature, 60)}”")}, "
        + $"epochs {ReportText.Ranges(finding.FlaggedEpochs)}. {EvidencePlans.For(finding.Kind)!.Statistic}.";

    /// <summary>A one-line account of the verdicts: the latest and the first Halt.</summary>
    public static string Headline(RunHistory history)
    {
        ArgumentNullException.ThrowIfNull(history);
        var judged = history.Epochs.Where(e => e.Verdict is not null).ToList();
        if (judged.Count == 0)
            return "No verdict stored yet.";
        var latest = judged[^1];
        var firstHalt = judged.FirstOrDefault(e => e.Verdict == VerdictKind.Halt);
        string text = $"Latest verdict: {latest.Verdict} at epoch {ReportText.Integer(latest.Epoch)}.";
        if (firstHalt is not null)
            text += $" First Halt advised at epoch {ReportText.Integer(firstHalt.Epoch)}.";
        return text;
    }

    private static string Html(RunHistory history, IReadOnlyList<FindingSummary> findings, IReadOnlyList<(FindingSummary Finding, string Path)> evidence, IReadOnlyList<MapTrust> trust, IReadOnlyList<(ChartKind Kind, string Path)> charts, string storePath, DateTimeOffset now)
    {
        string scriptHash = Convert.ToBase64String(SHA256.HashData(Encoding.UTF8.GetBytes(PageCheckScript)));
        var h = new StringBuilder();
        h.Append("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n");
        h.Append($"<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; img-src data:; style-src 'unsafe-inline'; script-src 'sha256-{scriptHash}'\">\n");
        h.Append("<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n");
        h.Append($"<title>DriftWatch report: {ReportText.Html(history.RunName, 80)}</title>\n");
        h.Append("<style>\n").Append(Style).Append("</style>\n");
        h.Append("<script>").Append(PageCheckScript).Append("</script>\n");
        h.Append("</head>\n<body>\n<main>\n");

        h.Append($"<h1>Run “{ReportText.Html(history.RunName)}”</h1>\n");
        h.Append($"<p class=\"headline\">{ReportText.Html(Headline(history))}</p>\n");
        h.Append($"<p class=\"read-first\" id=\"caution\"><strong>Read this first.</strong> {ReportText.Html(Caution)}</p>\n");
        h.Append("<section id=\"next\">\n<h2>What to look at next</h2>\n<ul>\n");
        foreach (string step in NextSteps(history, findings))
            h.Append($"<li>{ReportText.Html(step)}</li>\n");
        h.Append("</ul>\n</section>\n");

        h.Append("<section id=\"run\">\n<h2>The run</h2>\n<table class=\"facts\">\n");
        foreach (var (name, value) in Facts(history, storePath))
            h.Append($"<tr><th scope=\"row\">{ReportText.Html(name)}</th><td>{ReportText.Html(value)}</td></tr>\n");
        h.Append("</table>\n");
        if (!string.IsNullOrWhiteSpace(history.Policy))
            h.Append($"<details><summary>Gate policy the monitor used</summary><pre>{WebEncode(history.Policy)}</pre></details>\n");
        h.Append("</section>\n");

        h.Append("<section id=\"timeline\">\n<h2>Verdict timeline</h2>\n<div class=\"timeline\" role=\"list\">\n");
        foreach (var epoch in history.Epochs)
        {
            string kind = epoch.Verdict?.ToString() ?? "none";
            h.Append($"<span role=\"listitem\" class=\"cell {kind.ToLowerInvariant()}\" title=\"epoch {ReportText.Integer(epoch.Epoch)}: {kind}\"></span>");
        }
        h.Append("\n</div>\n<p class=\"legend\"><span class=\"cell continue\"></span> Continue <span class=\"cell caution\"></span> Caution <span class=\"cell halt\"></span> Halt <span class=\"cell none\"></span> no verdict</p>\n");
        h.Append("<ul class=\"spans\">\n");
        foreach (var (first, last, kind) in RunFindings.Timeline(history))
            h.Append($"<li>{(first == last ? "epoch " + ReportText.Integer(first) : $"epochs {ReportText.Integer(first)}–{ReportText.Integer(last)}")}: <strong>{kind}</strong></li>\n");
        h.Append("</ul>\n</section>\n");

        h.Append("<section id=\"findings\">\n<h2>Findings</h2>\n");
        if (history.NotChecked is { } notChecked)
            h.Append($"<p class=\"not-checked\">{ReportText.Html(notChecked)}.</p>\n");
        if (findings.Count == 0)
        {
            h.Append("<p>No findings: nothing was flagged at any epoch.</p>\n");
        }
        else
        {
            h.Append("<table id=\"findings-table\" class=\"findings\">\n<thead><tr><th scope=\"col\">severity</th><th scope=\"col\">finding</th><th scope=\"col\">feature</th>"
                + "<th scope=\"col\">raised at epochs</th><th scope=\"col\">covers since</th><th scope=\"col\">size</th><th scope=\"col\">judged against</th><th scope=\"col\">evidence (latest)</th></tr></thead>\n<tbody>\n");
            foreach (var f in findings)
            {
                h.Append($"<tr class=\"severity-{f.Severity.ToString().ToLowerInvariant()}\" data-kind=\"{f.Kind}\" data-feature=\"{(f.Feature.Length == 0 ? "" : ReportText.Html(f.Feature))}\" data-seen-only-by=\"{ReportText.Html(string.Join(", ", f.SeenOnlyBy))}\">");
                h.Append($"<td>{f.Severity}</td><td>{ReportText.Html(RunFindings.Describe(f))}</td><td>{(f.Feature.Length == 0 ? "(run)" : ReportText.Html(f.Feature))}</td>");
                h.Append($"<td>{ReportText.Html(ReportText.Ranges(f.FlaggedEpochs))}</td><td>{ReportText.Integer(f.Since)}</td>");
                h.Append($"<td class=\"number\">{ReportText.Html(SizeText(f))}</td><td class=\"number\">{ReportText.Html(AgainstText(f))}</td><td>{ReportText.Html(f.Evidence)}</td></tr>\n");
            }
            h.Append("</tbody>\n</table>\n");
            foreach (var (finding, path) in evidence)
            {
                string caption = EvidenceCaption(finding);
                h.Append($"<div class=\"finding-evidence severity-{finding.Severity.ToString().ToLowerInvariant()}\" data-kind=\"{finding.Kind}\" data-feature=\"{ReportText.Html(finding.Feature)}\">");
                h.Append($"<div class=\"finding-text\"><h3>{ReportText.Html(caption)}</h3><p>{ReportText.Html(finding.Evidence)}</p></div>");
                h.Append($"<figure><img src=\"data:image/png;base64,{Convert.ToBase64String(File.ReadAllBytes(path))}\" alt=\"{ReportText.Html(caption)}\"></figure></div>\n");
            }
        }
        h.Append("</section>\n");

        h.Append("<section id=\"trust\">\n<h2>Trust in the maps</h2>\n");
        if (trust.Count == 0)
        {
            h.Append($"<p>{ReportText.Html(NoTrust)}</p>\n");
        }
        else
        {
            h.Append($"<p>{ReportText.Html(TrustIntroduction(history))}</p>\n");
            h.Append("<table id=\"trust-table\" class=\"trust\">\n<thead><tr>");
            foreach (string header in TrustHeaders(history))
                h.Append($"<th scope=\"col\">{ReportText.Html(header)}</th>");
            h.Append("</tr></thead>\n<tbody>\n");
            foreach (var row in TrustRows(history, trust))
            {
                h.Append($"<tr data-method=\"{ReportText.Html(row[0])}\"><td>{ReportText.Html(row[0])}</td>");
                foreach (string cell in row.Skip(1))
                    h.Append($"<td class=\"number\">{ReportText.Html(cell)}</td>");
                h.Append("</tr>\n");
            }
            h.Append("</tbody>\n</table>\n");
            h.Append($"<details><summary>Per epoch and method ({ReportText.Integer(trust.Count)} maps)</summary>\n<table id=\"trust-epochs\" class=\"trust\">\n<thead><tr>");
            foreach (string header in EpochTrustHeaders)
                h.Append($"<th scope=\"col\">{ReportText.Html(header)}</th>");
            h.Append("</tr></thead>\n<tbody>\n");
            foreach (var t in trust)
            {
                h.Append($"<tr><td class=\"number\">{ReportText.Integer(t.Epoch)}</td><td>{ReportText.Html(t.Method)}</td>");
                foreach (string cell in EpochTrustCells(t))
                    h.Append($"<td class=\"number\">{ReportText.Html(cell)}</td>");
                h.Append("</tr>\n");
            }
            h.Append("</tbody>\n</table>\n</details>\n");
        }
        h.Append("</section>\n");

        h.Append("<section id=\"charts\">\n<h2>Charts</h2>\n");
        foreach (var (kind, path) in charts)
        {
            string data = Convert.ToBase64String(File.ReadAllBytes(path));
            string caption = Caption(kind, history);
            h.Append($"<figure><img src=\"data:image/png;base64,{data}\" alt=\"{ReportText.Html(caption)}\"><figcaption>{ReportText.Html(caption)}</figcaption></figure>\n");
        }
        h.Append("</section>\n");

        h.Append("<section id=\"epochs\">\n<h2>Epochs</h2>\n<table class=\"epochs\">\n<thead><tr><th scope=\"col\">epoch</th><th scope=\"col\">train loss</th><th scope=\"col\">validation loss</th>"
            + "<th scope=\"col\">verdict</th><th scope=\"col\">drift score</th><th scope=\"col\">top features by held-out share</th></tr></thead>\n<tbody>\n");
        foreach (var epoch in history.Epochs)
        {
            string top = epoch.IsAttributed
                ? string.Join(", ", epoch.TopByHeldOutShare(3).Select(f => $"{DisplayText.Clean(history.FeatureNames[f], 40)} {ReportText.Percent(epoch.HeldOutShare[f])}"))
                : "(not attributed)";
            h.Append($"<tr><td class=\"number\">{ReportText.Integer(epoch.Epoch)}</td><td class=\"number\">{ReportText.Number(epoch.TrainLoss)}</td><td class=\"number\">{ReportText.Number(epoch.ValidationLoss)}</td>");
            h.Append($"<td>{epoch.Verdict?.ToString() ?? "-"}</td><td class=\"number\">{ReportText.Number(epoch.Statistics?.Drift)}</td><td>{WebEncode(top)}</td></tr>\n");
        }
        h.Append("</tbody>\n</table>\n</section>\n");

        h.Append($"<footer><p id=\"page-check\">Page check: needs JavaScript.</p><p>Written by DriftWatch at {now.UtcDateTime.ToString("yyyy-MM-dd HH:mm", CultureInfo.InvariantCulture)} UTC from {ReportText.Html(storePath)}. Self-contained: this page loads nothing from anywhere.</p></footer>\n");
        h.Append("</main>\n</body>\n</html>\n");
        return h.ToString();
    }

    private static string Markdown(RunHistory history, IReadOnlyList<FindingSummary> findings, IReadOnlyList<(FindingSummary Finding, string Path)> evidence, IReadOnlyList<MapTrust> trust, IReadOnlyList<(ChartKind Kind, string Path)> charts, string folder, string storePath, DateTimeOffset now)
    {
        var m = new StringBuilder();
        m.Append($"# Run “{ReportText.Markdown(history.RunName)}”\n\n");
        m.Append($"{ReportText.Markdown(Headline(history))}\n\n");
        m.Append($"> **Read this first.** {ReportText.Markdown(Caution)}\n\n");
        m.Append("## What to look at next\n\n");
        foreach (string step in NextSteps(history, findings))
            m.Append($"- {ReportText.Markdown(step)}\n");
        m.Append('\n');

        m.Append("## The run\n\n| | |\n|---|---|\n");
        foreach (var (name, value) in Facts(history, storePath))
            m.Append($"| {ReportText.Markdown(name)} | {ReportText.Markdown(value)} |\n");
        m.Append('\n');
        if (!string.IsNullOrWhiteSpace(history.Policy))
            m.Append("Gate policy the monitor used:\n\n```json\n").Append(history.Policy.Replace("```", "` ` `", StringComparison.Ordinal).Trim()).Append("\n```\n\n");

        m.Append("## Verdict timeline\n\n");
        var spans = RunFindings.Timeline(history);
        if (spans.Count == 0)
            m.Append("No verdict stored yet.\n\n");
        foreach (var (first, last, kind) in spans)
            m.Append($"- {(first == last ? "epoch " + ReportText.Integer(first) : $"epochs {ReportText.Integer(first)}–{ReportText.Integer(last)}")}: **{kind}**\n");
        m.Append('\n');

        m.Append("## Findings\n\n");
        if (history.NotChecked is { } notChecked)
            m.Append($"{ReportText.Markdown(notChecked)}.\n\n");
        if (findings.Count == 0)
        {
            m.Append("No findings: nothing was flagged at any epoch.\n\n");
        }
        else
        {
            m.Append("| severity | finding | feature | raised at epochs | covers since | size | judged against | evidence (latest) |\n|---|---|---|---|---:|---:|---:|---|\n");
            foreach (var f in findings)
            {
                m.Append($"| {f.Severity} | {ReportText.Markdown(RunFindings.Describe(f))} | {(f.Feature.Length == 0 ? "(run)" : ReportText.Markdown(f.Feature))} | {ReportText.Markdown(ReportText.Ranges(f.FlaggedEpochs))} | ");
                m.Append($"{ReportText.Integer(f.Since)} | {ReportText.Markdown(SizeText(f))} | {ReportText.Markdown(AgainstText(f))} | {ReportText.Markdown(f.Evidence)} |\n");
            }
            m.Append('\n');
            foreach (var (finding, path) in evidence)
            {
                string caption = ReportText.Markdown(EvidenceCaption(finding));
                string relative = Path.GetRelativePath(folder, path).Replace('\\', '/');
                m.Append($"### {caption}\n\n{ReportText.Markdown(finding.Evidence)}\n\n![{caption}](<{relative}>)\n\n");
            }
        }

        m.Append("## Trust in the maps\n\n");
        if (trust.Count == 0)
        {
            m.Append($"{ReportText.Markdown(NoTrust)}\n\n");
        }
        else
        {
            m.Append($"{ReportText.Markdown(TrustIntroduction(history))}\n\n");
            var headers = TrustHeaders(history);
            m.Append("| " + string.Join(" | ", headers.Select(x => ReportText.Markdown(x))) + " |\n|---|" + string.Concat(Enumerable.Repeat("---:|", headers.Count - 1)) + "\n");
            foreach (var row in TrustRows(history, trust))
                m.Append("| " + string.Join(" | ", row.Select(x => ReportText.Markdown(x))) + " |\n");
            m.Append('\n');
            if (trust.Count <= MarkdownTrustRows)
            {
                m.Append("Per epoch and method:\n\n| " + string.Join(" | ", EpochTrustHeaders.Select(x => ReportText.Markdown(x))) + " |\n|---:|---|" + string.Concat(Enumerable.Repeat("---:|", EpochTrustHeaders.Length - 2)) + "\n");
                foreach (var t in trust)
                    m.Append($"| {ReportText.Integer(t.Epoch)} | {ReportText.Markdown(t.Method)} | " + string.Join(" | ", EpochTrustCells(t).Select(x => ReportText.Markdown(x))) + " |\n");
                m.Append('\n');
            }
            else
            {
                m.Append($"The {ReportText.Integer(trust.Count)} per-epoch figures are in the HTML report and in `driftwatch show --method NAME`.\n\n");
            }
        }

        m.Append("## Charts\n\n");
        foreach (var (kind, path) in charts)
        {
            string relative = Path.GetRelativePath(folder, path).Replace('\\', '/');
            string caption = ReportText.Markdown(Caption(kind, history));
            m.Append($"![{caption}](<{relative}>)\n\n*{caption}*\n\n");
        }
        m.Append($"---\nWritten by DriftWatch at {now.UtcDateTime.ToString("yyyy-MM-dd HH:mm", CultureInfo.InvariantCulture)} UTC from {ReportText.Markdown(storePath)}.\n");
        return m.ToString();
    }

    /// <summary>What a person could look at next, one plain sentence per kind of finding the run raised (names as stored; escape them for display).</summary>
    public static IReadOnlyList<string> NextSteps(RunHistory history, IReadOnlyList<FindingSummary> findings)
    {
        ArgumentNullException.ThrowIfNull(history);
        ArgumentNullException.ThrowIfNull(findings);
        var steps = new List<string>();
        if (findings.Count == 0)
        {
            steps.Add("Nothing was flagged at any epoch. The charts still show what the model leans on; a feature with a large share deserves a look at how it is produced.");
            return steps;
        }
        // Findings that only other methods showed get their own step; the steps by kind are about the verdict's method's.
        var others = findings.Where(f => !f.SeenOnlyBy.IsDefaultOrEmpty).ToList();
        findings = findings.Where(f => f.SeenOnlyBy.IsDefaultOrEmpty).ToList();
        string Names(FindingKind kind) => string.Join(", ", findings.Where(f => f.Kind == kind && f.Feature.Length > 0).Select(f => $"'{f.Feature}'").Distinct());
        var best = history.Epochs.Where(e => e.ValidationLoss is double v && double.IsFinite(v)).MinBy(e => e.ValidationLoss!.Value);
        // One step per kind, in the order of what they mean (faults, then the loss, then advisories and health); each
        // kind's advice is its rule's, and kinds that share a step (numerical trouble, a monitoring failure) give it once.
        var kinds = findings.Select(f => f.Kind).Distinct().Select(k => k.Info).OrderBy(info => info.Role).ThenBy(info => info.Kind);
        foreach (var info in kinds)
            steps.Add(info.Advice(new Detection.Rules.AdviceContext(Names(info.Kind), best?.Epoch)));
        steps = [.. steps.Distinct(StringComparer.Ordinal)];
        if (best is not null && findings.Any(f => f.Severity == Detection.VerdictKind.Halt || f.Kind == FindingKind.Overfitting))
        {
            steps.Add($"To go back to the weights of epoch {best.Epoch.ToString(CultureInfo.InvariantCulture)} (the lowest validation loss): "
                + $"driftwatch weights {history.RunName} --epoch best --out best.weights — it writes out the stored snapshot of the epoch with the lowest "
                + "validation loss among those that have one (for a run watched with follow, that epoch's TorchScript file).");
        }
        foreach (var group in others.GroupBy(f => string.Join(" and ", f.SeenOnlyBy)))
        {
            string features = string.Join(", ", group.Select(f => $"'{f.Feature}' ({RunFindings.Describe(f.Kind)})").Distinct());
            steps.Add($"{features} swung in the maps of {group.Key} only, not in those of {history.PrimaryMethod}, which the verdict reads: it may be an artefact of one method or a swing the other misses. Compare the charts of both methods (--method {group.First().SeenOnlyBy[0]}) before acting.");
        }
        return steps;
    }

    private const int MarkdownTrustRows = 200;

    private const string NoTrust =
        "The run has one method and no quality figures. Configure several methods (their rank agreement is then stored) or MonitorOptions.Quality, or add maps of another method with 'driftwatch reattribute --quality'.";

    private static readonly string[] EpochTrustHeaders =
        ["epoch", "method", "ρ", "relative infidelity", "relative max-sensitivity", "infidelity", "max-sensitivity", "rows"];

    private static string TrustIntroduction(RunHistory history) =>
        $"ρ is Spearman's rank correlation of held-out importance with {history.PrimaryMethod}, the method the verdict reads (1 = same order; "
        + $"for {history.PrimaryMethod} itself, its lowest ρ with any other method). Quality figures after Yeh, Hsieh, Suggala, Inouye, Ravikumar 2019, "
        + "on a seeded subsample of probe rows, relative so methods compare (0 is best): infidelity is the squared error of the output change a map predicts "
        + "when random feature subsets are set to the baseline, over the squared change itself (1 = no better than predicting no change; plain-gradient maps "
        + "such as saliency and smoothgrad are per unit of input, so theirs is high by construction); max-sensitivity is the largest change of a row's scores "
        + "when its inputs move a little, over the scores' own size. Median over epochs, last measured value in brackets.";

    private static List<string> TrustHeaders(RunHistory history) =>
        ["method", "epochs", "quality measured", "relative infidelity", "relative max-sensitivity", $"ρ with {history.PrimaryMethod}: median (lowest, at epoch)"];

    private static IEnumerable<string[]> TrustRows(RunHistory history, IReadOnlyList<MapTrust> trust) =>
        RunTrust.Summarise(trust).Select(s => new[]
        {
            s.Method,
            ReportText.Integer(s.Epochs),
            ReportText.Integer(s.MeasuredEpochs),
            s.MeasuredEpochs == 0 ? "-" : $"{Figure(s.MedianInfidelity)} ({Figure(s.LastInfidelity)})",
            s.MeasuredEpochs == 0 ? "-" : $"{Figure(s.MedianSensitivity)} ({Figure(s.LastSensitivity)})",
            double.IsFinite(s.MedianAgreement) ? $"{MethodAgreement.Format(s.MedianAgreement)} ({MethodAgreement.Format(s.LowestAgreement)}, {ReportText.Integer(s.LowestAgreementEpoch)})" : "-",
        });

    private static IEnumerable<string> EpochTrustCells(MapTrust t) =>
    [
        MethodAgreement.Format(t.Agreement),
        t.Measured ? Figure(t.RelativeInfidelity) : "-",
        t.Measured ? Figure(t.RelativeMaxSensitivity) : "-",
        t.Measured ? ReportText.Number(t.Infidelity) : "-",
        t.Measured ? ReportText.Number(t.MaxSensitivity) : "-",
        t.Measured ? ReportText.Integer(t.Rows) : "-",
    ];

    private static string Figure(double value) =>
        double.IsFinite(value) ? value.ToString("0.000", CultureInfo.InvariantCulture) : "n/a";

    // A finding's size and what it is judged against, each with its unit and meaning, so a percentage threshold is never
    // read as an attribution noise floor: e.g. "0.263 alignment gap" against "0.698 noise floor", "12.0 % generalisation
    // loss" against "5.0 % threshold".
    internal static string SizeText(FindingSummary f) => Measured(f.Measure.Write(f.Size), f.Measure.Size);

    internal static string AgainstText(FindingSummary f) => Measured(f.Measure.Write(f.NoiseFloor), f.Measure.Against);

    private static string Measured(string value, string meaning) => value == "-" || meaning.Length == 0 ? "-" : value + " " + meaning;

    private static List<(string Name, string Value)> Facts(RunHistory history, string storePath)
    {
        var facts = new List<(string, string)>
        {
            ("run", history.RunName),
            ("description", history.Description.Length == 0 ? "(none)" : history.Description),
            ("created", history.CreatedUtc.ToString("yyyy-MM-dd HH:mm", CultureInfo.InvariantCulture) + " UTC"),
            ("store", storePath),
            ("probe set", $"{ReportText.Integer(history.HeldOutRows)} held-out + {ReportText.Integer(history.TrainingRows)} training rows; SHA-256 {history.ProbeHash}"),
            ("features", $"{ReportText.Integer(history.FeatureNames.Length)}: {string.Join(", ", history.FeatureNames.Select((n, i) => $"{n} ({history.FeatureKinds.ElementAtOrDefault(i)?.ToLowerInvariant() ?? "?"})"))}"),
            ("target and baseline", $"{history.Target}, baseline {history.Baseline}"),
        };
        foreach (var (method, settings) in history.MethodSettingsReader)
        {
            string text = settings.Count == 0 ? "(no settings)" : string.Join(", ", settings.Select(s => $"{s.Key} {s.Value}"));
            string role = method == history.PrimaryMethod ? "method (read by the detector)" : "method";
            facts.Add((role, $"{method}: {text}"));
        }
        facts.Add(("shown", $"method {history.Method}; {ReportText.Integer(history.Epochs.Length)} complete epochs ({ReportText.Integer(history.Epochs[0].Epoch)} to {ReportText.Integer(history.Epochs[^1].Epoch)}), {ReportText.Integer(history.Epochs.Count(e => e.IsAttributed))} attributed"));
        return facts;
    }

    private static string Caption(ChartKind kind, RunHistory history) => kind switch
    {
        ChartKind.Trend => "Trend: share of importance per feature (held-out solid, training dashed) in its noise-floor band; rings at the first and last epoch a finding names the feature; losses beneath.",
        ChartKind.Divergence => "Divergence: training half against held-out half for flagged and top features, shares with noise bands above, label alignment below.",
        ChartKind.Heatmap => "Heatmap: held-out share per epoch and feature, largest features on top; dots where a finding names the feature.",
        ChartKind.Drift => "Drift: verdicts, drift score and rank agreement with the best epoch, generalisation gap and generalisation loss.",
        ChartKind.Feature => $"Feature detail: per-row attributions of “{DisplayText.Clean(history.Rows.FirstOrDefault()?.Feature ?? ChartCatalog.DefaultFeature(history) ?? "", 60)}” per epoch and half.",
        _ => kind.ToString(),
    };

    // Text already cleaned or built from cleaned parts; only HTML-encoded.
    private static string WebEncode(string text) => System.Net.WebUtility.HtmlEncode(text);

    private const string Style = """
        body { font-family: "DejaVu Sans", Verdana, sans-serif; color: #222; background: #fff; margin: 0; }
        main { max-width: 1240px; margin: 0 auto; padding: 16px 24px 48px; }
        h1 { font-size: 1.6em; margin: 0.4em 0 0.2em; overflow-wrap: anywhere; }
        h2 { font-size: 1.25em; border-bottom: 1px solid #d9d9d9; padding-bottom: 4px; margin-top: 1.6em; }
        .headline { font-size: 1.1em; }
        .read-first { background: #f3f3f3; border-left: 6px solid #666; padding: 10px 14px; }
        table { border-collapse: collapse; width: 100%; font-size: 0.92em; }
        th, td { border: 1px solid #d9d9d9; padding: 4px 8px; text-align: left; vertical-align: top; overflow-wrap: break-word; }
        table.findings td:nth-child(-n+5), table.findings th:nth-child(-n+5) { white-space: nowrap; }
        table.findings td:nth-child(2), table.findings td:nth-child(3) { white-space: normal; min-width: 8em; }
        thead th { background: #f3f3f3; }
        table.facts th { width: 16em; background: #f8f8f8; font-weight: normal; color: #444; }
        td.number { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
        table.findings td.number { white-space: normal; min-width: 7em; }
        table.findings td:last-child { min-width: 24em; }
        tr.severity-halt td:first-child { font-weight: bold; }
        .timeline { display: flex; flex-wrap: wrap; gap: 2px; margin: 8px 0; }
        .cell { display: inline-block; width: 14px; height: 22px; border: 1px solid #999; vertical-align: middle; }
        .cell.continue { background: #d9d9d9; }
        .cell.caution { background: repeating-linear-gradient(45deg, #fff, #fff 3px, #666 3px, #666 5px); }
        .cell.halt { background: #222; }
        .cell.none { background: #fff; }
        .legend .cell { width: 12px; height: 12px; margin-left: 10px; }
        figure { margin: 18px 0; }
        .finding-evidence { display: flex; flex-wrap: wrap; gap: 16px; align-items: flex-start; margin: 18px 0; border-top: 1px solid #d9d9d9; }
        .finding-evidence .finding-text { flex: 1 1 260px; }
        .finding-evidence .finding-text h3 { font-size: 1em; }
        .finding-evidence figure { flex: 3 1 640px; margin: 8px 0; }
        figure img { max-width: 100%; height: auto; border: 1px solid #d9d9d9; }
        figcaption { color: #444; font-size: 0.92em; }
        pre { background: #f8f8f8; padding: 8px; overflow-x: auto; }
        footer { margin-top: 2em; color: #666; font-size: 0.88em; }

        """;
}
