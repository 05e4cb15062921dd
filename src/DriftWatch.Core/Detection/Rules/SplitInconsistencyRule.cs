namespace DriftWatch.Detection.Rules;

/// <summary>
/// <b>Split inconsistency</b>, a data note: a feature's column fails the split-consistency check — alone, it predicts the
/// label better in training rows than in held-out rows — while the model does not (yet) rely on it. Raised from the first
/// epoch, whatever the warm-up, since it is about the data and not the model; once the model relies on the feature the
/// leak rule names it instead and the note gives way. Always a Caution: the data are worth a look, but only reliance makes it a leak.
/// </summary>
public sealed class SplitInconsistencyRule : IFindingRule
{
    private readonly Dictionary<int, int> _since = [];

    /// <summary>The split-inconsistency kind's words and advice.</summary>
    public static FindingKindInfo Kind { get; } = new(
        FindingKind.SplitInconsistency,
        "relates to the label differently in training and held-out rows",
        "A data note: a column that alone predicts the label better in training rows than in held-out rows, before the model relies on it.",
        null,
        SeverityRule.AlwaysCaution,
        EvaluationRole.Advisory,
        a => $"Check how {a.Features} is produced for training rows and for held-out rows: alone it predicts the label better where the model trains. The model does not lean on it yet; if it starts to, the run gets a leak finding.")
    {
        Measure = new FindingMeasure("training-minus-held-out score of the column alone", "95th percentile of the side-exchange null", "")
        {
            Statistic = "split_score_gap",
            Unit = "score",
            Bound = "null_bound",
        },
    };

    /// <inheritdoc/>
    public FindingKindInfo Info => Kind;

    /// <inheritdoc/>
    public RuleStage Stage => RuleStage.Loss;

    /// <inheritdoc/>
    public void Evaluate(EpochView epoch, IList<Finding> findings)
    {
        ArgumentNullException.ThrowIfNull(epoch);
        ArgumentNullException.ThrowIfNull(findings);
        var run = epoch.Run;
        var check = Reliance.Decided(run);
        if (check is null)
            return;
        for (int f = 0; f < run.Context.Schema.Count; f++)
        {
            if (Reliance.CheckOf(run, check, f) is not { Fails: true } input)
                continue;
            string name = run.FeatureName(f);
            int since = _since.TryGetValue(f, out int first) ? first : _since[f] = epoch.Epoch;
            if (findings.Any(x => x.Kind == FindingKind.Leak && x.Feature == name))
                continue;
            findings.Add(new Finding(FindingKind.SplitInconsistency, Kind.SeverityUnder(run.Policy), name, input.Gap, input.NullUpper, new EpochSpan(since, epoch.Epoch),
                $"'{name}' relates to the label differently in training and held-out rows ({Reliance.CheckSentence(input, check)}), "
                + "but the model does not rely on it more for training rows: a data note, and a leak if the model starts to"));
        }
    }
}
