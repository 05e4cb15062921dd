using System.Collections.Immutable;
using DriftWatch.Storage;

namespace DriftWatch.Detection;

/// <summary>Converts verdicts and findings to and from their stored documents.</summary>
public static class VerdictDocuments
{
    /// <summary>The stored form of a verdict.</summary>
    internal static VerdictDocument ToDocument(Verdict verdict, int runId)
    {
        ArgumentNullException.ThrowIfNull(verdict);
        return new VerdictDocument
        {
            RunId = runId,
            Epoch = verdict.Epoch,
            Kind = verdict.Kind.ToString(),
            Reasons = [.. verdict.Reasons],
            Findings = verdict.Findings.Select(f => new FindingDocument
            {
                Kind = f.Kind.Name,
                Feature = f.Feature,
                Severity = f.Severity.ToString(),
                Size = f.Size,
                NoiseFloor = f.NoiseFloor,
                Epochs = [f.Epochs.First, f.Epochs.Last],
                Evidence = f.Evidence,
                SeenOnlyBy = f.SeenOnlyBy.IsDefaultOrEmpty ? [] : [.. f.SeenOnlyBy],
                Agreement = f.Agreement,
            }).ToList(),
        };
    }

    /// <summary>A verdict read back from the store.</summary>
    internal static Verdict FromDocument(VerdictDocument document)
    {
        ArgumentNullException.ThrowIfNull(document);
        var findings = document.Findings.Select(f => new Finding(
            FindingKinds.FromStored(f.Kind),
            Enum.Parse<VerdictKind>(f.Severity),
            f.Feature,
            f.Size,
            f.NoiseFloor,
            EpochSpan.FromStored(f.Epochs),
            f.Evidence)
        {
            SeenOnlyBy = f.SeenOnlyBy is null ? [] : [.. f.SeenOnlyBy],
            Agreement = f.Agreement,
        }).ToImmutableArray();
        return new Verdict(document.Epoch, Enum.Parse<VerdictKind>(document.Kind), [.. document.Reasons], findings);
    }
}
