using System.Globalization;

namespace DriftWatch.Detection.Rules;

/// <summary>A rule's consecutive flagged epochs per feature, so a rule fires on the policy's patience-th one.</summary>
public sealed class Streaks
{
    private readonly Dictionary<int, (int Length, int Since)> _streaks = [];
    private readonly int _patience;

    /// <summary>Streaks that fire on their <paramref name="patience"/>-th consecutive flagged epoch.</summary>
    public Streaks(int patience)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(patience, 1);
        _patience = patience;
    }

    /// <summary>
    /// Records whether <paramref name="feature"/> is flagged at <paramref name="epoch"/>; returns the first epoch of its
    /// streak once the streak reaches the patience, null otherwise. An epoch not flagged ends the streak.
    /// </summary>
    public int? Observe(int feature, bool flagged, int epoch)
    {
        if (!flagged)
        {
            _streaks.Remove(feature);
            return null;
        }
        var (length, since) = _streaks.GetValueOrDefault(feature, (0, epoch));
        _streaks[feature] = (length + 1, since);
        return length + 1 >= _patience ? since : null;
    }
}

/// <summary>Numbers in rule messages: invariant culture, so findings read the same on every machine.</summary>
internal static class RuleText
{
    public static string Format(FormattableString text) => text.ToString(CultureInfo.InvariantCulture);
}
